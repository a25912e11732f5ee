/**
 * T2′ spread: the reversible part of T2* as a Lorentzian (Cauchy) distribution
 * of off-resonance within a voxel.
 *
 *   1/T2′ = 1/T2* − 1/T2,   p(f) = (Γ/π)/(Γ² + f²),   Γ = 1/(2πT2′) (Hz, half width;
 *   full width at half maximum 1/(πT2′)),
 *
 * whose ensemble average Σ p(f)·exp(−i2πf·t) = exp(−|t|/T2′): the voxel FID
 * decays as exp(−t/T2*) and a refocusing pulse brings it back to exp(−TE/T2)
 * (Hahn 1950, Phys. Rev. 80:580; the Lorentzian line shape: Haacke et al.
 * 1999, MRI: Physical Principles and Sequence Design, ch. 20).
 *
 * Discretization (deterministic, no random numbers): N isochromats of equal
 * weight 1/N at the quantile midpoints f_k = Γ·tan(π((k + ½)/N − ½)),
 * k = 0 … N−1: symmetric about 0, no net shift, and (the frequencies being
 * incommensurate) no exact repetition of the FID.
 *
 * Accuracy (measured by spreadFid against exp(−t/T2′), test/effects-t2prime):
 * the largest error of the voxel's FID envelope over 0 ≤ t ≤ 3·T2′, as a
 * fraction of the initial amplitude, is
 *
 *   N       8     16    32    64    128   256
 *   error   0.33  0.24  0.16  0.10  0.06  0.04   (≲ 1/√N)
 *
 * i.e. at most about 1/√N: the far quantiles carry weight 1/N each and their phases
 * are effectively random once 2πf·t ≫ 1. The error is in the tail of the FID
 * (t ≳ T2′); the first ~0.5·T2′ and the spin-echo peak are much closer. A
 * uniform frequency grid with exact bin weights halves the error at equal N
 * but repeats exactly after 1/δ and makes the columns of a voxel unequal, so
 * it is not used.
 */

/** A tissue's spread: offsets (Hz) and weights (sum 1), ordered by frequency. */
export interface Spread {
  df: Float64Array;
  weight: Float64Array;
}

/** The no-spread case: one isochromat at 0 Hz. */
export const NO_SPREAD: Spread = { df: Float64Array.of(0), weight: Float64Array.of(1) };

/** 1/T2′ = 1/T2* − 1/T2 (1/s); 0 when T2* ≥ T2 or either is not finite. */
export function r2prime(t2: number, t2star: number): number {
  if (!(t2star > 0) || !Number.isFinite(t2star)) return 0;
  const r = 1 / t2star - (Number.isFinite(t2) && t2 > 0 ? 1 / t2 : 0);
  return r > 1e-12 ? r : 0;
}

/**
 * The N-point Lorentzian spread for 1/T2′ = `r2p` (1/s): equal weights at the
 * quantile midpoints. N = 1 or r2p = 0 gives NO_SPREAD.
 */
export function lorentzianSpread(r2p: number, n: number): Spread {
  if (!(r2p > 0) || n <= 1) return NO_SPREAD;
  const gamma = r2p / (2 * Math.PI); // half width at half maximum (Hz)
  const df = new Float64Array(n), weight = new Float64Array(n).fill(1 / n);
  for (let k = 0; k < n >> 1; k++) {
    const f = gamma * Math.tan(Math.PI * ((k + 0.5) / n - 0.5));
    df[k] = f;
    df[n - 1 - k] = -f;
  }
  return { df, weight };
}

/**
 * Envelope of the discrete spread's FID at time t (s): Σ w_k·cos(2πf_k·t)
 * (the imaginary part vanishes by symmetry). Slow reference for tests and the
 * accuracy table.
 */
export function spreadFid(s: Spread, t: number): number {
  let acc = 0;
  for (let k = 0; k < s.df.length; k++) acc += s.weight[k]! * Math.cos(2 * Math.PI * s.df[k]! * t);
  return acc;
}

/**
 * How the N spread isochromats of a voxel are shared among its d² in-plane
 * columns, so each column costs N/d² isochromats instead of N. When N is even
 * and the N/2 mirror pairs (±f) divide evenly among the d² columns, pairs are
 * dealt out from the centre of the line outwards in snake order (columns 0, 1,
 * …, d²−1, d²−1, …, 0, 0, 1, …): every column holds a symmetric set (no net
 * frequency shift inside a voxel) spanning the whole distribution, with equal
 * weights, so a uniform voxel keeps a uniform magnetization and the voxel sum
 * is exactly the N-point spread. Otherwise every column holds all N.
 * Returns, per column-in-voxel s (0 … d²−1), bin indices and their weights
 * (the fraction of the column's magnetization).
 */
export function spreadAssignment(sp: Spread, d2: number): { bins: number[]; weight: number[] }[] {
  const n = sp.df.length;
  const out = Array.from({ length: d2 }, () => ({ bins: [] as number[], weight: [] as number[] }));
  const pairs = n >> 1;
  if (n % 2 === 0 && d2 > 1 && pairs >= d2 && pairs % d2 === 0) {
    // pair p = bins (n/2 − 1 − p, n/2 + p), p = 0 nearest 0 Hz
    for (let p = 0; p < pairs; p++) {
      const round = Math.floor(p / d2), pos = p % d2;
      const col = round % 2 === 0 ? pos : d2 - 1 - pos;
      out[col]!.bins.push(n / 2 - 1 - p, n / 2 + p);
    }
    const w = d2 / n;
    for (const c of out) for (let k = 0; k < c.bins.length; k++) c.weight.push(w);
  } else {
    for (const c of out) for (let k = 0; k < n; k++) { c.bins.push(k); c.weight.push(sp.weight[k]!); }
  }
  return out;
}

/** Relative error of the discrete spread's T2′ factor at time t (s) after excitation: spreadFid(s, t)/exp(−t·r2p) − 1. */
export function spreadRelativeError(s: Spread, r2p: number, t: number): number {
  return spreadFid(s, t) / Math.exp(-Math.abs(t) * r2p) - 1;
}

/** Largest spread size {@link spreadSizeFor} tries. */
export const SPREAD_SIZE_LIMIT = 1024;

/**
 * The smallest spread size n = from·2^k ≤ `limit` whose T2′ factor lies within
 * `tol` (relative) of exp(−t·r2p) at every t of `times` (s); null if none does.
 * `from` should keep the voxel's columns sharing the spread (a multiple of 2·d²).
 */
export function spreadSizeFor(r2p: number, times: readonly number[], tol: number, from: number, limit = SPREAD_SIZE_LIMIT): number | null {
  for (let n = from; n <= limit; n *= 2) {
    const s = lorentzianSpread(r2p, n);
    if (times.every((t) => Math.abs(spreadRelativeError(s, r2p, t)) <= tol)) return n;
  }
  return null;
}

/** Relative error of the T2′ factor above which {@link spreadWarnings} warns (and the "auto" T2′ model takes the closed form). */
export const SPREAD_WARN_TOLERANCE = 0.05;

/**
 * The largest relative error of the n-point spread's T2′ factor over `times` (s), with its sign and time; times where
 * exp(−t/T2′) is below 1 % (no signal left to weigh) are left out (err 0 when none is left).
 */
export function spreadWorstError(r2p: number, n: number, times: readonly number[]): { err: number; t: number } {
  const s = lorentzianSpread(r2p, n);
  let worst = { err: 0, t: times[0] ?? 0 };
  for (const t of times) {
    if (!(t >= 0) || Math.exp(-t * r2p) < 0.01) continue;
    const e = spreadRelativeError(s, r2p, t);
    if (Math.abs(e) > Math.abs(worst.err)) worst = { err: e, t };
  }
  return worst;
}

/** Tissues grouped by T2′ (to 4 digits), in phantom order: each group's R2′ (1/s), names and tissue indices. */
export function t2primeGroups(tissues: readonly { name: string; t2: number; t2star: number }[]): { r2p: number; names: string[]; index: number[] }[] {
  const groups = new Map<string, { r2p: number; names: string[]; index: number[] }>();
  tissues.forEach((t, i) => {
    const r2p = r2prime(t.t2, t.t2star);
    if (!(r2p > 0)) return;
    const key = (1e3 / r2p).toPrecision(4);
    const g = groups.get(key);
    if (g) {
      g.names.push(t.name);
      g.index.push(i);
    } else groups.set(key, { r2p, names: [t.name], index: [i] });
  });
  return [...groups.values()];
}

/** "+15 %" / "−39 %". */
function percent(x: number): string {
  return `${x >= 0 ? "+" : "−"}${Math.abs(100 * x).toFixed(0)} %`;
}

/**
 * Warnings for tissues whose T2′ factor is off by more than SPREAD_WARN_TOLERANCE with `n` spread isochromats
 * per voxel at the dephasing times `times` (s; times[0] the echo time, the others the readout's ends), each
 * naming a spread size that brings it within, and the closed form where `closedFormHolds`.
 */
export function spreadWarnings(tissues: readonly { name: string; t2: number; t2star: number }[], n: number, d2: number, times: readonly number[], closedFormHolds: boolean): string[] {
  const out: string[] = [];
  if (n <= 1 || times.length === 0) return out;
  const step = 2 * d2;
  const from = Math.max(step, Math.ceil((2 * n) / step) * step);
  for (const { r2p, names } of t2primeGroups(tissues)) {
    const w = spreadWorstError(r2p, n, times);
    if (Math.abs(w.err) <= SPREAD_WARN_TOLERANCE) continue;
    const exact = Math.exp(-w.t * r2p);
    const better = spreadSizeFor(r2p, times.filter((t) => t >= 0 && Math.exp(-t * r2p) >= 0.01), SPREAD_WARN_TOLERANCE, from);
    const fixes = [
      ...(closedFormHolds ? ["--t2prime-model closed-form makes it exact here (R2* = R2 + R2′)"] : []),
      better !== null ? `--t2prime-isochromats ${better} brings it within ${100 * SPREAD_WARN_TOLERANCE} %` : `no spread of up to ${SPREAD_SIZE_LIMIT} isochromats brings it within ${100 * SPREAD_WARN_TOLERANCE} %`,
    ];
    out.push(
      `T2′ spread of ${n} isochromats per voxel is coarse ${w.t === times[0] ? "at TE" : "at"} ${(w.t * 1e3).toFixed(2)} ms for ${names.join(", ")} (T2′ ${(1e3 / r2p).toFixed(1)} ms): ` +
        `its T2′ factor exp(−t/T2′) = ${exact.toFixed(3)} comes out ${(exact * (1 + w.err)).toFixed(3)} (${percent(w.err)}), so the T2* weighting is off; ` + fixes.join("; "),
    );
  }
  return out;
}

/**
 * The "auto" T2′ model (IsochromatOptions.t2primeModel): per tissue, true where the n-point spread is off by more
 * than SPREAD_WARN_TOLERANCE at any of `times` (s); and a note naming those tissues. Only for sequences where
 * the closed form holds (an ideally spoiled gradient echo).
 */
export function autoClosedForm(tissues: readonly { name: string; t2: number; t2star: number }[], n: number, times: readonly number[]): { closed: boolean[]; note: string | null } {
  const closed = tissues.map(() => false), parts: string[] = [];
  for (const { r2p, names, index } of t2primeGroups(tissues)) {
    const w = spreadWorstError(r2p, n, times);
    if (Math.abs(w.err) <= SPREAD_WARN_TOLERANCE) continue;
    for (const i of index) closed[i] = true;
    parts.push(`${names.join(", ")} (T2′ ${(1e3 / r2p).toFixed(1)} ms; ${n === 1 ? "no spread" : `a spread of ${n}`} would be off by ${percent(w.err)} at ${(w.t * 1e3).toFixed(2)} ms)`);
  }
  const note = parts.length
    ? `T2′ in closed form, R2* = R2 + R2′ (the Lorentzian spread's exact average where nothing refocuses it: an ideally spoiled gradient echo), for ${parts.join("; ")}; --t2prime-model spread keeps the spread`
    : null;
  return { closed, note };
}
