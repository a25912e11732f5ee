/**
 * Cartesian sampling masks over the phase-encoding plane [slice-encoding steps, phase]:
 * 1 = the whole readout line at (slice-encoding step, phase line) is sampled. Index
 * c = floor(N/2) is k = 0 along each axis (recon/fft.ts convention).
 *
 * - full: every line.
 * - uniform: phase line y is sampled when (y − c) is a multiple of R (so
 *   k = 0 is always sampled), plus the fully sampled centre (ACS) on every
 *   slice-encoding step.
 * - random (variable density): outside the centre, line y is sampled
 *   independently with probability p(y) = min(1, λ·(1 − d)²),
 *   d = |y − c|/(N/2) ∈ [0, 1]; λ is found by bisection so that the expected
 *   number of lines (centre included, p = 1 there) is N/R. Slice-encoding steps draw
 *   independently from the same density (polynomial variable density in the
 *   spirit of M. Lustig, D. Donoho, J. M. Pauly, "Sparse MRI", Magn. Reson.
 *   Med. 58 (2007) 1182–1195).
 * - poisson: Poisson-disc sampling over both phase directions: points are
 *   taken in a seeded random order and kept if no kept point lies closer than
 *   r (in grid steps; Euclidean over (slice-encoding step, phase)); every point is
 *   tried, so the pattern is maximal (dart throwing, R. L. Cook, "Stochastic
 *   sampling in computer graphics", ACM Trans. Graph. 5 (1986) 51–72). The
 *   centre block (ACS lines × min(ACS, slice-encoding steps) slice-encoding steps) is taken first
 *   and fully. r is found by bisection so that the count is nearest N·P/R.
 *   With one slice-encoding step it is a Poisson-disc pattern over the phase lines.
 * - random with exact: per slice-encoding step exactly round(N/R) lines: the
 *   ACS lines, and the rest drawn without replacement from the other lines
 *   (those partial Fourier keeps) with weights p(y), by the keys u^(1/p)
 *   (P. S. Efraimidis, P. G. Spirakis, "Weighted random sampling with a
 *   reservoir", Inf. Process. Lett. 97 (2006) 181–185): the largest keys win;
 *   a line of weight 0 (y = 0 for even N) is taken last, so that R near 1
 *   still gets round(N/R) lines.
 * - partial Fourier F ∈ (0.5, 1] (any mask): phase lines y < N − round(F·N)
 *   (the first, negative-k lines) are removed.
 */
import { UserError } from "../errors.js";
import type { Rng } from "./prng.js";

export const MASK_KINDS = ["full", "uniform", "random", "poisson"] as const;
export type MaskKind = (typeof MASK_KINDS)[number];

export interface MaskOptions {
  kind: MaskKind;
  /** Nominal acceleration R (≥ 1); whole number for "uniform". */
  accel: number;
  /** Fully sampled centre lines along phase (ACS), ≥ 0. */
  acs: number;
  /** Partial Fourier fraction of phase lines kept, (0.5, 1]. */
  partialFourier: number;
  /** random only: exactly round(N/R) lines per slice-encoding step (ACS included) instead of N/R on average. */
  exact?: boolean;
}

export interface Mask {
  slice: number;
  phase: number;
  /** uint8 [slice-encoding steps][phase]. */
  data: Uint8Array;
  /** Per phase line sampling probability (random mask only). */
  density: Float64Array | null;
  /** Poisson-disc radius in grid steps (poisson only). */
  radius: number | null;
  /** Acquired fraction and the resulting acceleration P·N/count. */
  sampled: number;
  acceleration: number;
}

/** Checks mask options against the grid; UserErrors name the option. */
export function checkMaskOptions(o: MaskOptions, sliceSteps: number, phase: number): void {
  if (!MASK_KINDS.includes(o.kind)) throw new UserError(`unknown mask "${o.kind}"; use one of ${MASK_KINDS.join(", ")}`, undefined, "--mask");
  const lines = o.kind === "poisson" ? sliceSteps * phase : phase;
  if (!(o.accel >= 1) || !Number.isFinite(o.accel)) throw new UserError(`acceleration must be a number ≥ 1, got ${o.accel}`, undefined, "--accel");
  if (o.kind === "full" && o.accel !== 1) throw new UserError(`acceleration ${o.accel} needs an undersampling mask; add --mask uniform, random or poisson`, undefined, "--accel");
  if (o.accel > lines) throw new UserError(`acceleration ${o.accel} is larger than the ${lines} ${o.kind === "poisson" ? "phase-encoding points" : "phase lines"} of the matrix; use at most ${lines}`, undefined, "--accel");
  if (o.kind === "uniform" && !Number.isInteger(o.accel)) throw new UserError(`a uniform mask needs a whole-number acceleration, got ${o.accel}`, undefined, "--accel");
  if (!Number.isInteger(o.acs) || o.acs < 0) throw new UserError(`expected a whole number of centre lines ≥ 0, got ${o.acs}`, undefined, "--acs");
  if (o.acs > phase) throw new UserError(`${o.acs} centre (ACS) lines are more than the ${phase} phase lines; use at most ${phase}`, undefined, "--acs");
  if ((o.kind === "random" || o.kind === "poisson") && o.acs > phase / o.accel) {
    throw new UserError(`${o.acs} centre lines already exceed the ${(phase / o.accel).toFixed(1)} lines that acceleration ${o.accel} allows; use fewer --acs lines or a lower --accel`, undefined, "--acs");
  }
  if (!(o.partialFourier > 0.5 && o.partialFourier <= 1)) throw new UserError(`partial Fourier fraction must be in (0.5, 1], got ${o.partialFourier}`, undefined, "--partial-fourier");
  if (o.exact) {
    if (o.kind !== "random") throw new UserError(`--exact applies to --mask random (uniform and poisson are not drawn line by line); drop --exact or use --mask random`, undefined, "--exact");
    const kept = Math.round(o.partialFourier * phase);
    if (Math.round(phase / o.accel) > kept) {
      throw new UserError(`acceleration ${o.accel} needs ${Math.round(phase / o.accel)} lines but partial Fourier ${o.partialFourier} keeps only ${kept}; use a higher --accel or a larger --partial-fourier`, undefined, "--exact");
    }
  }
}

/** First ACS line index along an axis of n points with `acs` lines. */
function acsStart(n: number, acs: number): number {
  return Math.floor(n / 2) - Math.floor(acs / 2);
}

/** Variable density p(y) with λ chosen so Σ p = n/R (see file header). */
export function randomDensity(n: number, accel: number, acs: number): Float64Array {
  const c = Math.floor(n / 2), a0 = acsStart(n, acs);
  const p = new Float64Array(n);
  const fill = (lambda: number): number => {
    let s = 0;
    for (let y = 0; y < n; y++) {
      const d = Math.abs(y - c) / (n / 2);
      p[y] = y >= a0 && y < a0 + acs ? 1 : Math.min(1, lambda * (1 - d) * (1 - d));
      s += p[y]!;
    }
    return s;
  };
  const target = n / accel;
  let lo = 0, hi = 1;
  while (fill(hi) < target && hi < 1e12) hi *= 2;
  for (let it = 0; it < 200; it++) {
    const mid = 0.5 * (lo + hi);
    if (fill(mid) < target) lo = mid;
    else hi = mid;
  }
  fill(0.5 * (lo + hi));
  return p;
}

/** Builds the mask; the rng is used by random and poisson only. */
export function makeMask(sliceSteps: number, phase: number, o: MaskOptions, rng: Rng): Mask {
  const data = new Uint8Array(sliceSteps * phase);
  const c = Math.floor(phase / 2), a0 = acsStart(phase, o.acs);
  let density: Float64Array | null = null;
  let radius: number | null = null;
  if (o.kind === "full") data.fill(1);
  else if (o.kind === "uniform") {
    for (let p = 0; p < sliceSteps; p++) {
      for (let y = 0; y < phase; y++) {
        const onGrid = (((y - c) % o.accel) + o.accel) % o.accel === 0;
        data[p * phase + y] = onGrid || (y >= a0 && y < a0 + o.acs) ? 1 : 0;
      }
    }
  } else if (o.kind === "random" && o.exact) {
    density = randomDensity(phase, o.accel, o.acs);
    const first = phase - Math.round(o.partialFourier * phase), want = Math.round(phase / o.accel);
    const key = new Float64Array(phase);
    for (let p = 0; p < sliceSteps; p++) {
      let have = 0;
      const free: number[] = [];
      for (let y = 0; y < phase; y++) {
        key[y] = rng.uniform(); // one draw per line, always, so the stream does not depend on the ACS
        if (y >= a0 && y < a0 + o.acs) {
          if (y >= first) { data[p * phase + y] = 1; have++; }
        } else if (y >= first) {
          // a line of density 0 (the edge line |y − c| = N/2 of an even N) comes last, taken only when every other line is
          key[y] = density[y]! > 0 ? Math.pow(key[y]!, 1 / density[y]!) : -Infinity;
          free.push(y);
        }
      }
      free.sort((a, b) => (key[a] === key[b] ? a - b : key[b]! - key[a]!));
      for (let k = 0; k < Math.min(free.length, Math.max(0, want - have)); k++) data[p * phase + free[k]!] = 1;
    }
  } else if (o.kind === "random") {
    density = randomDensity(phase, o.accel, o.acs);
    for (let p = 0; p < sliceSteps; p++) {
      for (let y = 0; y < phase; y++) data[p * phase + y] = rng.uniform() < density[y]! ? 1 : 0;
    }
  } else {
    radius = poissonDisc(data, sliceSteps, phase, o, rng);
  }
  if (o.partialFourier < 1) {
    const first = phase - Math.round(o.partialFourier * phase);
    for (let p = 0; p < sliceSteps; p++) for (let y = 0; y < first; y++) data[p * phase + y] = 0;
  }
  let count = 0;
  for (const v of data) count += v;
  return { slice: sliceSteps, phase, data, density, radius, sampled: count / data.length, acceleration: count > 0 ? data.length / count : Infinity };
}

/** Fills `data` with the Poisson-disc pattern of file header; returns r. */
function poissonDisc(data: Uint8Array, P: number, N: number, o: MaskOptions, rng: Rng): number {
  const total = P * N;
  const order = new Int32Array(total);
  for (let i = 0; i < total; i++) order[i] = i;
  for (let i = total - 1; i > 0; i--) {
    const j = Math.floor(rng.uniform() * (i + 1));
    const t = order[i]!;
    order[i] = order[j]!;
    order[j] = t;
  }
  const a0 = acsStart(N, o.acs);
  const acsP = Math.min(o.acs, P), p0 = acsStart(P, acsP);
  const inAcs = (p: number, y: number) => y >= a0 && y < a0 + o.acs && p >= p0 && p < p0 + acsP;
  const trial = new Uint8Array(total);
  const run = (r: number): number => {
    trial.fill(0);
    let count = 0;
    for (let p = 0; p < P; p++) for (let y = 0; y < N; y++) if (inAcs(p, y)) { trial[p * N + y] = 1; count++; }
    const R = Math.ceil(r) - 1, r2 = r * r;
    for (let k = 0; k < total; k++) {
      const idx = order[k]!;
      if (trial[idx]) continue;
      const p = Math.floor(idx / N), y = idx - p * N;
      let ok = true;
      for (let dp = -Math.min(R, P); dp <= Math.min(R, P) && ok; dp++) {
        const q = p + dp;
        if (q < 0 || q >= P) continue;
        for (let dy = -R; dy <= R; dy++) {
          const x = y + dy;
          if (x < 0 || x >= N || dp * dp + dy * dy >= r2) continue;
          if (trial[q * N + x]) { ok = false; break; }
        }
      }
      if (ok) { trial[idx] = 1; count++; }
    }
    return count;
  };
  const target = total / o.accel;
  let lo = 1, hi = Math.max(P, N) + 1, best = 1, bestErr = Infinity;
  for (let it = 0; it < 40; it++) {
    const mid = 0.5 * (lo + hi);
    const n = run(mid);
    const err = Math.abs(n - target);
    if (err < bestErr) { bestErr = err; best = mid; }
    if (n > target) lo = mid;
    else hi = mid;
    if (hi - lo < 1e-4) break;
  }
  run(best);
  data.set(trial);
  return best;
}
