/**
 * Seeded pseudo-random numbers of our own, identical on every platform:
 *
 * - xoshiro128** 1.0 (32-bit state words), D. Blackman and S. Vigna,
 *   "Scrambled linear pseudorandom number generators", ACM Trans. Math.
 *   Softw. 47(4) (2021) 36; reference code at prng.di.unimi.it.
 * - its state is filled from SplitMix64 (G. L. Steele, D. Lea, C. H. Flood,
 *   "Fast splittable pseudorandom number generators", OOPSLA 2014), as the
 *   xoshiro authors recommend for seeding.
 * - normal deviates by the Box–Muller transform (G. E. P. Box, M. E. Muller,
 *   "A note on the generation of random normal deviates", Ann. Math. Stat. 29
 *   (1958) 610–611).
 *
 * Independent streams: `streamSeed(seed, caseIndex, purpose)` feeds distinct
 * SplitMix64 starting points, so the noise of case 3 does not depend on how
 * many random numbers the mask of case 3 used.
 */

const MASK64 = (1n << 64n) - 1n;

/** One SplitMix64 step: returns [next state, output], both 64-bit BigInts. */
function splitmix64(state: bigint): [bigint, bigint] {
  const s = (state + 0x9e3779b97f4a7c15n) & MASK64;
  let z = s;
  z = ((z ^ (z >> 30n)) * 0xbf58476d1ce4e5b9n) & MASK64;
  z = ((z ^ (z >> 27n)) * 0x94d049bb133111ebn) & MASK64;
  return [s, z ^ (z >> 31n)];
}

/** What a stream is used for; each purpose gets its own stream per case. */
export const STREAM = { perturb: 1, mask: 2, noise: 3, noiseLines: 4, rawMargin: 5, rawNoiseLinesMargin: 6, averageNoise: 7, averageMargin: 8 } as const;

/** 64-bit starting point of the stream (seed, case, purpose). */
export function streamSeed(seed: number, caseIndex: number, purpose: number): bigint {
  let s = BigInt(seed >>> 0);
  let out: bigint;
  [s, out] = splitmix64(s ^ (BigInt(caseIndex >>> 0) << 32n));
  [, out] = splitmix64(out ^ BigInt(purpose));
  return out;
}

/** xoshiro128** generator with uniform and normal deviates. */
export class Rng {
  private s0: number;
  private s1: number;
  private s2: number;
  private s3: number;
  private spare = 0;
  private hasSpare = false;

  /** State from two SplitMix64 outputs of `seed64` (never all zero). */
  constructor(seed64: bigint) {
    let s = seed64 & MASK64, a: bigint, b: bigint;
    [s, a] = splitmix64(s);
    [, b] = splitmix64(s);
    this.s0 = Number(a & 0xffffffffn) | 0;
    this.s1 = Number(a >> 32n) | 0;
    this.s2 = Number(b & 0xffffffffn) | 0;
    this.s3 = Number(b >> 32n) | 0;
    if ((this.s0 | this.s1 | this.s2 | this.s3) === 0) this.s0 = 1;
  }

  static stream(seed: number, caseIndex: number, purpose: number): Rng {
    return new Rng(streamSeed(seed, caseIndex, purpose));
  }

  /** Next 32-bit output as an unsigned integer (xoshiro128** next()). */
  nextU32(): number {
    const s1 = this.s1;
    const x = Math.imul(s1, 5);
    const result = Math.imul((x << 7) | (x >>> 25), 9) >>> 0;
    const t = s1 << 9;
    this.s2 ^= this.s0;
    this.s3 ^= this.s1;
    this.s1 ^= this.s2;
    this.s0 ^= this.s3;
    this.s2 ^= t;
    this.s3 = (this.s3 << 11) | (this.s3 >>> 21);
    return result;
  }

  /** Uniform on [0, 1) with 53 random bits. */
  uniform(): number {
    const a = this.nextU32() >>> 5, b = this.nextU32() >>> 6;
    return (a * 67108864 + b) / 9007199254740992;
  }

  /** Uniform on [lo, hi). */
  between(lo: number, hi: number): number {
    return lo + (hi - lo) * this.uniform();
  }

  /** Standard normal deviate (mean 0, variance 1), Box–Muller, pairs used in turn. */
  normal(): number {
    if (this.hasSpare) {
      this.hasSpare = false;
      return this.spare;
    }
    const u1 = 1 - this.uniform(); // (0, 1]
    const u2 = this.uniform();
    const r = Math.sqrt(-2 * Math.log(u1));
    this.spare = r * Math.sin(2 * Math.PI * u2);
    this.hasSpare = true;
    return r * Math.cos(2 * Math.PI * u2);
  }
}
