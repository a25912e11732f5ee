/**
 * Aliasing (wrap) geometry of Cartesian sampling, closed form.
 *
 * Sampling k-space at Δk = 1/FOV_acq makes the reconstructed image periodic
 * with period FOV_acq (Nyquist; Bernstein, King & Zhou 2004, ch. 11; common
 * practice). On an acquired grid of L points of size d, index a sits at
 * (a − ⌊L/2⌋)·d and covers [a − ⌊L/2⌋ − ½, a − ⌊L/2⌋ + ½)·d, so the
 * fundamental range in pixels is [−⌊L/2⌋ − ½, L − ⌊L/2⌋ − ½); a point
 * outside it appears at its position minus the nearest whole number of
 * periods L that brings it inside. The reconstruction keeps the central M
 * points (oversampling removal), pixel n at (n − ⌊M/2⌋)·d.
 */

/** An axis of the acquired and the displayed grid. */
export interface AliasAxis {
  /** Acquired points (with oversampling). */
  L: number;
  /** Displayed points. */
  M: number;
  /** Pixel size (m). */
  d: number;
}

/** Position in pixels (relative to the centre index) → where it shows in the periodic image, in pixels. */
export function foldPx(p: number, L: number): number {
  const c = Math.floor(L / 2);
  const q = p + c + 0.5;
  return q - L * Math.floor(q / L) - c - 0.5;
}

/** True when the pixel position lies inside the acquired range (does not fold). */
export function insideAcquired(p: number, L: number): boolean {
  const c = Math.floor(L / 2);
  return p >= -c - 0.5 && p < L - c - 0.5;
}

/** True when the pixel position lies inside the displayed image. */
export function insideDisplayed(p: number, M: number): boolean {
  const m = Math.floor(M / 2);
  return p >= -m - 0.5 && p < M - m - 0.5;
}

/** Displayed pixel index (fractional, centres at integers) of a pixel position. */
export function displayedIndex(p: number, M: number): number {
  return p + Math.floor(M / 2);
}

/** Acquired phase lines for a matrix and phase oversampling fraction (as the phase-encode table makes them). */
export function phaseLinesFor(matrix: number, oversampling: number): number {
  let lines = Math.round(matrix * (1 + oversampling));
  if ((lines - matrix) % 2 !== 0) lines += 1;
  return lines;
}

/**
 * Smallest FOV (m) along an axis with M displayed and L acquired points such that no signal
 * between vMin and vMax (m, signed) folds into the displayed image: a point above folds to
 * p − L, which must stay below the displayed range (p < L − ⌊M/2⌋ − ½), and one below to
 * p + L, which must stay above it (p ≥ M − ⌊M/2⌋ − ½ − L); with p = v·M/FOV.
 */
export function minFovNoWrap(vMin: number, vMax: number, M: number, L: number): number {
  const m = Math.floor(M / 2);
  const up = vMax > 0 ? (vMax * M) / (L - m - 0.5) : 0;
  const down = vMin < 0 ? (-vMin * M) / (L - M + m + 0.5) : 0;
  return Math.max(up, down);
}

/**
 * Smallest phase oversampling fraction (acquired lines − M)/M, in the steps the phase-encode
 * table allows (L − M even), such that signal between vMin and vMax (m) at FOV `fov` does not
 * fold into the displayed image.
 */
export function minOversamplingNoWrap(vMin: number, vMax: number, M: number, fov: number): number {
  const m = Math.floor(M / 2);
  const d = fov / M;
  // above: p < L − m − ½ (strict); below: p ≥ M − m − ½ − L
  const up = vMax > 0 ? Math.floor(vMax / d + m + 0.5) + 1 : 0;
  const down = vMin < 0 ? Math.ceil(-vMin / d + M - m - 0.5 - 1e-9) : 0;
  let L = Math.max(M, up, down);
  if ((L - M) % 2 !== 0) L += 1;
  return (L - M) / M;
}
