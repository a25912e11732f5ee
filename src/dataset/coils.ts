/**
 * Receive coils: circular loop elements on a cylinder around the physical z
 * axis, their magnetic field by the Biot–Savart law, and the complex receive
 * sensitivity that follows from it by reciprocity.
 *
 * ## Geometry
 * `elements` loops per row, `rows` rows along z. Element j of row r has its
 * centre at (R·cosφ, R·sinφ, zc + (r − (rows−1)/2)·rowSpacing) with
 * φ = 2πj/elements (element 0 on +x), R = arrayRadius, and its normal
 * n = (cosφ, sinφ, 0) pointing radially outward; coil index = r·elements + j.
 * A point is enclosed by the array when it lies on the axis side of every
 * loop plane: (p − c)·n < 0 for every element.
 *
 * ## Field of one loop (per unit current, T/A)
 * Exact off-axis field of a circular filament of radius a, in its local
 * cylinder coordinates (ρ from the loop axis, ζ along n from the loop
 * centre), with α² = a² + ρ² + ζ² − 2aρ, β² = a² + ρ² + ζ² + 2aρ,
 * m = k² = 1 − α²/β², r² = ρ² + ζ² and K, E the complete elliptic integrals
 * of the first and second kind with parameter m (J. C. Simpson, J. E. Lane,
 * C. D. Immer, R. C. Youngquist, "Simple analytic expressions for the
 * magnetic field of a circular current loop", NASA/TM-2013-217919; the same
 * result as W. R. Smythe, Static and Dynamic Electricity, 1950, §7.10):
 *   B_ζ = μ0·I/(2π·α²·β) · [(a² − r²)·E + α²·K]
 *   B_ρ = μ0·I·ζ/(2π·α²·β·ρ) · [(a² + r²)·E − α²·K]
 * On the axis this is μ0·I·a²/(2(a² + ζ²)^{3/2}). K and E by the
 * arithmetic–geometric mean (M. Abramowitz, I. A. Stegun, Handbook of
 * Mathematical Functions, 1964, §17.6).
 *
 * ## Receive sensitivity (reciprocity)
 * With Mxy = Mx + i·My precessing as exp(−iω0t) (the engine's convention)
 * and B1 the coil's field per unit current, the flux through the coil is
 * Re[(Bx − i·By)·Mxy]; demodulating the EMF with exp(+iω0t) leaves
 * s = iω0·(Bx − i·By)·Mxy (D. I. Hoult, "The principle of reciprocity in
 * signal strength calculations — a mathematical guide", Concepts Magn.
 * Reson. 12 (2000) 173–187). isofold drops the constant iω0 and uses
 *   S_c(r) = (Bx − i·By)(r) / κ,
 * with one real κ for all coils such that sqrt(Σ_c |S_c|²) = 1 at the array
 * centre (0, 0, zc). The uniform "body" coil has S = 1 everywhere.
 */
import { MU0 } from "../constants.js";
import { ellipticKEWasm } from "./elliptic-wasm.js";

export { MU0 };

/** A coil array; `elements` = 0 means the single uniform coil. */
export interface CoilArray {
  /** Loops per row (≥ 1), or 0 for the uniform coil. */
  elements: number;
  /** Rows along z (≥ 1). */
  rows: number;
  /** Loop radius (m). */
  loopRadius: number;
  /** Distance of each loop centre from the z axis (m). */
  arrayRadius: number;
  /** Centre-to-centre distance of rows along z (m). */
  rowSpacing: number;
  /** z of the array centre (m). */
  zCentre: number;
}

export function coilCount(a: CoilArray): number {
  return a.elements === 0 ? 1 : a.elements * a.rows;
}

/** Centre (m) and unit normal of every loop, coil index = row·elements + j. */
export function loopPlacement(a: CoilArray): { centre: [number, number, number]; normal: [number, number, number] }[] {
  const out: { centre: [number, number, number]; normal: [number, number, number] }[] = [];
  for (let r = 0; r < a.rows; r++) {
    const z = a.zCentre + (r - (a.rows - 1) / 2) * a.rowSpacing;
    for (let j = 0; j < a.elements; j++) {
      const phi = (2 * Math.PI * j) / a.elements;
      const c = Math.cos(phi), s = Math.sin(phi);
      out.push({ centre: [a.arrayRadius * c, a.arrayRadius * s, z], normal: [c, s, 0] });
    }
  }
  return out;
}

/**
 * Complete elliptic integrals K(m) and E(m), parameter m = k² in [0, 1), by
 * the arithmetic–geometric mean (Abramowitz & Stegun 17.6.1–17.6.4):
 * K = π/(2·a_N), E = K·(1 − Σ_n 2^{n−1}·c_n²), c_0² = m. Writes [K, E] to out.
 * For m near 1 (a point next to the wire) more terms are needed; the loop stops at 64.
 */
export function ellipticKE(m: number, out: Float64Array | number[]): void {
  // c_{n+1} = c_n²/(4·a_{n+1}) (A&S 17.6.2) instead of (a_n − b_n)/2: no cancellation, and the loop ends
  let a = 1, b = Math.sqrt(1 - m), c = Math.sqrt(m), sum = 0.5 * m, pow = 1;
  for (let n = 0; n < 64 && c > 1e-17 * a; n++) {
    const an = 0.5 * (a + b);
    c = (c * c) / (4 * an);
    b = Math.sqrt(a * b);
    a = an;
    sum += pow * c * c;
    pow *= 2;
  }
  const K = Math.PI / (2 * a);
  out[0] = K;
  out[1] = K * (1 - sum);
}

const KE = new Float64Array(2);

/**
 * Field of a circular loop of radius a (m) carrying current I (A) at local
 * cylinder coordinates ρ ≥ 0 (m from the axis) and ζ (m along the normal):
 * writes [B_ρ, B_ζ] in tesla to out (formula in the file header).
 */
export function loopFieldLocal(out: Float64Array | number[], a: number, I: number, rho: number, zeta: number): void {
  const r2 = rho * rho + zeta * zeta;
  const alpha2 = a * a + r2 - 2 * a * rho;
  const beta2 = a * a + r2 + 2 * a * rho;
  const beta = Math.sqrt(beta2);
  const m = 1 - alpha2 / beta2;
  ellipticKE(m, KE);
  const K = KE[0]!, E = KE[1]!;
  const c = (MU0 * I) / (2 * Math.PI * alpha2 * beta);
  out[1] = c * ((a * a - r2) * E + alpha2 * K);
  if (rho < 1e-5 * a) {
    // series near the axis (cancellation in the bracket): B_ρ ≈ 3μ0·I·a²·ζ·ρ / (4(a²+ζ²)^{5/2})
    const d = a * a + zeta * zeta;
    out[0] = (3 * MU0 * I * a * a * zeta * rho) / (4 * d * d * Math.sqrt(d));
  } else {
    out[0] = ((c * zeta) / rho) * ((a * a + r2) * E - alpha2 * K);
  }
}

const BL = new Float64Array(2);

/**
 * Field (T per ampere) at p of a loop of radius a centred at c with unit
 * normal n; writes [Bx, By, Bz] to out.
 */
export function loopField(
  out: Float64Array | number[], a: number,
  cx: number, cy: number, cz: number, nx: number, ny: number, nz: number,
  px: number, py: number, pz: number,
): void {
  const dx = px - cx, dy = py - cy, dz = pz - cz;
  const zeta = dx * nx + dy * ny + dz * nz;
  const rx = dx - zeta * nx, ry = dy - zeta * ny, rz = dz - zeta * nz;
  const rho = Math.sqrt(rx * rx + ry * ry + rz * rz);
  loopFieldLocal(BL, a, 1, rho, zeta);
  const br = rho > 0 ? BL[0]! / rho : 0, bz = BL[1]!;
  out[0] = bz * nx + br * rx;
  out[1] = bz * ny + br * ry;
  out[2] = bz * nz + br * rz;
}

const B3 = new Float64Array(3);

/** κ: sqrt(Σ_c |Bx − iBy|²) of the unnormalised coils at the array centre (0, 0, zc). */
export function sensitivityScale(a: CoilArray): number {
  if (a.elements === 0) return 1;
  let s = 0;
  for (const { centre: c, normal: n } of loopPlacement(a)) {
    loopField(B3, a.loopRadius, c[0], c[1], c[2], n[0], n[1], n[2], 0, 0, a.zCentre);
    s += B3[0]! * B3[0]! + B3[1]! * B3[1]!;
  }
  return Math.sqrt(s);
}

const arrayMemo = new WeakMap<CoilArray, { key: CoilArray; kappa: number; placement: ReturnType<typeof loopPlacement> }>();
/** The array's numbers (a copy: the memo stays valid only while they are unchanged). */
function arrayKey(a: CoilArray): CoilArray {
  return { elements: a.elements, rows: a.rows, loopRadius: a.loopRadius, arrayRadius: a.arrayRadius, rowSpacing: a.rowSpacing, zCentre: a.zCentre };
}
function sameArray(a: CoilArray, b: CoilArray): boolean {
  return Object.is(a.elements, b.elements) && Object.is(a.rows, b.rows) && Object.is(a.loopRadius, b.loopRadius) &&
    Object.is(a.arrayRadius, b.arrayRadius) && Object.is(a.rowSpacing, b.rowSpacing) && Object.is(a.zCentre, b.zCentre);
}

/**
 * Receive sensitivities S_c = (Bx − i·By)/κ at `count` points (m), written
 * interleaved (re, im) to out at index 2·((firstCoil + c)·stride + offset + i).
 * `stride` is the number of points per coil in `out`.
 */
export function sensitivitiesAt(
  a: CoilArray, x: ArrayLike<number>, y: ArrayLike<number>, z: ArrayLike<number>, count: number,
  out: Float64Array, stride: number, firstCoil = 0, offset = 0,
): void {
  if (a.elements === 0) {
    for (let i = 0; i < count; i++) {
      out[2 * (firstCoil * stride + offset + i)] = 1;
      out[2 * (firstCoil * stride + offset + i) + 1] = 0;
    }
    return;
  }
  // κ and the placement once per array object (callers evaluate a few points at a time)
  let memo = arrayMemo.get(a);
  if (!memo || !sameArray(memo.key, a)) {
    memo = { key: arrayKey(a), kappa: sensitivityScale(a), placement: loopPlacement(a) };
    arrayMemo.set(a, memo);
  }
  const kappa = memo.kappa;
  const placement = memo.placement, ra = a.loopRadius;
  for (let i0 = 0; i0 < count; i0 += MANY) {
    const n = Math.min(MANY, count - i0);
    for (let q = 0; q < placement.length; q++) {
      const { centre: c, normal: nrm } = placement[q]!;
      loopFieldMany(ra, c, nrm, x, y, z, i0, n);
      const base = 2 * ((firstCoil + q) * stride + offset + i0);
      for (let i = 0; i < n; i++) {
        out[base + 2 * i] = MB.bx[i]! / kappa;
        out[base + 2 * i + 1] = -MB.by[i]! / kappa;
      }
    }
  }
}

/** Points per batch of loopFieldMany. */
const MANY = 64;
/** loopFieldMany's scratch and results (Bx, By of the batch). */
const MB = {
  rx: new Float64Array(MANY), ry: new Float64Array(MANY), rz: new Float64Array(MANY), rho: new Float64Array(MANY), zeta: new Float64Array(MANY),
  r2: new Float64Array(MANY), alpha2: new Float64Array(MANY), beta: new Float64Array(MANY), m: new Float64Array(MANY),
  K: new Float64Array(MANY), E: new Float64Array(MANY), bx: new Float64Array(MANY), by: new Float64Array(MANY),
};

/**
 * ellipticKE of m[0 … n): K[i], E[i], each with the same operations in the
 * same order as ellipticKE (the same bits); the points advance together, so
 * their independent iterations overlap on the processor.
 */
export function ellipticKEMany(m: Float64Array, n: number, K: Float64Array, E: Float64Array, aS: Float64Array = new Float64Array(n), bS: Float64Array = new Float64Array(n), cS: Float64Array = new Float64Array(n), sumS: Float64Array = new Float64Array(n)): void {
  for (let i = 0; i < n; i++) {
    aS[i] = 1;
    bS[i] = Math.sqrt(1 - m[i]!);
    cS[i] = Math.sqrt(m[i]!);
    sumS[i] = 0.5 * m[i]!;
  }
  let pow = 1;
  for (let it = 0; it < 64; it++) {
    let any = false;
    for (let i = 0; i < n; i++) {
      const a = aS[i]!, c = cS[i]!;
      if (!(c > 1e-17 * a)) continue;
      const b = bS[i]!, an = 0.5 * (a + b), c1 = (c * c) / (4 * an);
      cS[i] = c1;
      bS[i] = Math.sqrt(a * b);
      aS[i] = an;
      sumS[i] = sumS[i]! + pow * c1 * c1;
      any = true;
    }
    if (!any) break;
    pow *= 2;
  }
  for (let i = 0; i < n; i++) {
    const k = Math.PI / (2 * aS[i]!);
    K[i] = k;
    E[i] = k * (1 - sumS[i]!);
  }
}
const KE_A = new Float64Array(MANY), KE_B = new Float64Array(MANY), KE_C = new Float64Array(MANY), KE_S = new Float64Array(MANY);

/**
 * loopField (per unit current) at points i0 … i0+n−1 (n ≤ MANY) into MB.bx,
 * MB.by: the same operations in the same order per point (the same bits),
 * the elliptic integrals of the batch together (ellipticKEMany).
 */
function loopFieldMany(a: number, c: readonly number[], nrm: readonly number[], x: ArrayLike<number>, y: ArrayLike<number>, z: ArrayLike<number>, i0: number, n: number): void {
  const { rx, ry, rz, rho, zeta, r2, alpha2, beta, m, K, E, bx, by } = MB;
  const cx = c[0]!, cy = c[1]!, cz = c[2]!, nx = nrm[0]!, ny = nrm[1]!, nz = nrm[2]!;
  for (let i = 0; i < n; i++) {
    const dx = x[i0 + i]! - cx, dy = y[i0 + i]! - cy, dz = z[i0 + i]! - cz;
    const ze = dx * nx + dy * ny + dz * nz;
    const px = dx - ze * nx, py = dy - ze * ny, pz = dz - ze * nz;
    const rh = Math.sqrt(px * px + py * py + pz * pz);
    rx[i] = px;
    ry[i] = py;
    rz[i] = pz;
    rho[i] = rh;
    zeta[i] = ze;
    // loopFieldLocal's first steps
    const q2 = rh * rh + ze * ze;
    const al2 = a * a + q2 - 2 * a * rh;
    const be2 = a * a + q2 + 2 * a * rh;
    r2[i] = q2;
    alpha2[i] = al2;
    beta[i] = Math.sqrt(be2);
    m[i] = 1 - al2 / be2;
  }
  // on the SIMD kernel where it runs (elliptic-wasm.ts: the same bits)
  if (!ellipticKEWasm(m, n, K, E)) ellipticKEMany(m, n, K, E, KE_A, KE_B, KE_C, KE_S);
  for (let i = 0; i < n; i++) {
    const rh = rho[i]!, ze = zeta[i]!, q2 = r2[i]!, al2 = alpha2[i]!, k = K[i]!, e = E[i]!;
    const cc = (MU0 * 1) / (2 * Math.PI * al2 * beta[i]!);
    const bZeta = cc * ((a * a - q2) * e + al2 * k);
    let bRho: number;
    if (rh < 1e-5 * a) {
      const d = a * a + ze * ze;
      bRho = (3 * MU0 * 1 * a * a * ze * rh) / (4 * d * d * Math.sqrt(d));
    } else {
      bRho = ((cc * ze) / rh) * ((a * a + q2) * e - al2 * k);
    }
    const br = rh > 0 ? bRho / rh : 0;
    bx[i] = bZeta * nx + br * rx[i]!;
    by[i] = bZeta * ny + br * ry[i]!;
  }
}

/**
 * Largest value of (p − c)·n over the points and loops, i.e. how far (m) the
 * worst point lies beyond a loop plane; < 0 means every point is enclosed.
 */
export function enclosureMargin(a: CoilArray, x: ArrayLike<number>, y: ArrayLike<number>, count: number): number {
  if (a.elements === 0) return -Infinity;
  let worst = -Infinity;
  // rows differ only in z, so the first row decides
  for (const { centre: c, normal: n } of loopPlacement(a).slice(0, a.elements)) {
    for (let i = 0; i < count; i++) {
      const d = (x[i]! - c[0]) * n[0] + (y[i]! - c[1]) * n[1];
      if (d > worst) worst = d;
    }
  }
  return worst;
}

/**
 * Sensitivities of the uniform coil (coil 0) and then every loop of `a` at
 * n points, out[2·(q·n + i)]: the dataset's coil set (dataset/simulate.ts),
 * one function for every thread that evaluates it.
 */
export function uniformAndLoops(a: CoilArray, x: ArrayLike<number>, y: ArrayLike<number>, z: ArrayLike<number>, n: number, out: Float64Array): void {
  sensitivitiesAt({ ...a, elements: 0 }, x, y, z, n, out, n, 0);
  sensitivitiesAt(a, x, y, z, n, out, n, 1);
}

/** What {@link cellsEnclosureMargin} reads of sampled cells (isochromats/index.ts IsochromatCells). */
export interface CellColumns {
  columns: number;
  colA: ArrayLike<number>; colB: ArrayLike<number>; entStart: ArrayLike<number>; entW: ArrayLike<number>;
  uGrid: ArrayLike<number>; vGrid: ArrayLike<number>; wGrid: ArrayLike<number>;
  ctx: { axes: { read: ArrayLike<number>; phase: ArrayLike<number>; slice: ArrayLike<number> } };
}

/**
 * enclosureMargin over the centres of sampled cells (as isochromats/index.ts
 * cellCentres places them), without making them: (p − c)·n is linear in the
 * cell's grid coordinates (u, v, w), so over a column (u, v fixed) its
 * largest value is at the column's least or greatest w. The same maximum up
 * to rounding (the terms are summed in another order).
 */
export function cellsEnclosureMargin(a: CoilArray, cells: CellColumns): number {
  if (a.elements === 0) return -Infinity;
  const { read: R, phase: P, slice: S } = cells.ctx.axes;
  const loops = loopPlacement(a).slice(0, a.elements);
  const cu = loops.map(({ normal: n }) => R[0]! * n[0] + R[1]! * n[1]);
  const cv = loops.map(({ normal: n }) => P[0]! * n[0] + P[1]! * n[1]);
  const cw = loops.map(({ normal: n }) => S[0]! * n[0] + S[1]! * n[1]);
  const c0 = loops.map(({ centre: c, normal: n }) => c[0] * n[0] + c[1] * n[1]);
  let worst = -Infinity;
  for (let col = 0; col < cells.columns; col++) {
    const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
    if (e1 <= e0) continue;
    let wLo = Infinity, wHi = -Infinity;
    for (let e = e0; e < e1; e++) {
      const w = cells.wGrid[cells.entW[e]!]!;
      if (w < wLo) wLo = w;
      if (w > wHi) wHi = w;
    }
    const u = cells.uGrid[cells.colA[col]!]!, v = cells.vGrid[cells.colB[col]!]!;
    for (let q = 0; q < loops.length; q++) {
      const d = u * cu[q]! + v * cv[q]! + Math.max(wLo * cw[q]!, wHi * cw[q]!) - c0[q]!;
      if (d > worst) worst = d;
    }
  }
  return worst;
}
