/**
 * Bloch kernels. Out-parameter style: every function takes preallocated typed
 * arrays, loads values into locals, and allocates nothing.
 *
 * Conventions (DEVELOPERS.md, Physics conventions): Mxy = Mx + i·My. Free precession over t at offset
 * Δf (Hz) multiplies Mxy by exp(−i2πΔf·t)·exp(−t/T2); Mz relaxes to M0 with
 * T1. A gradient area A (T·s/m) adds the phase −2π·γ̄·A·r. The state of
 * isochromat i of a chunk lives at index i − i0 of mr, mi, mz.
 */

/**
 * RF pulse as an affine map per isochromat class: M ← Rz(φ)·(A·Rz(−φ)·M + b·m0).
 * `maps` holds 12 numbers per class: A row-major (9) then b (3).
 * `base` is the offset of this pulse's first class in `maps`. The state of
 * isochromat i is at index k0 + i − i0 of mr, mi, mz.
 */
export function applyRf(
  mr: Float64Array, mi: Float64Array, mz: Float64Array,
  m0: Float64Array, cls: Int32Array, i0: number, i1: number,
  maps: Float64Array, base: number, cosPhi: number, sinPhi: number, k0 = 0,
): void {
  if (cosPhi === 1 && sinPhi === 0) {
    // zero pulse phase: no frame rotation (the same numbers as the general path with cos 1, sin 0)
    for (let i = i0; i < i1; i++) {
      const k = k0 + i - i0;
      const o = base + cls[i]! * 12;
      const x = mr[k]!, y = mi[k]!, z = mz[k]!, m = m0[i]!;
      mr[k] = maps[o]! * x + maps[o + 1]! * y + maps[o + 2]! * z + maps[o + 9]! * m;
      mi[k] = maps[o + 3]! * x + maps[o + 4]! * y + maps[o + 5]! * z + maps[o + 10]! * m;
      mz[k] = maps[o + 6]! * x + maps[o + 7]! * y + maps[o + 8]! * z + maps[o + 11]! * m;
    }
    return;
  }
  for (let i = i0; i < i1; i++) {
    const k = k0 + i - i0;
    const o = base + cls[i]! * 12;
    const x0 = mr[k]!, y0 = mi[k]!, z = mz[k]!, m = m0[i]!;
    // into the pulse frame: rotate by −φ
    const x = x0 * cosPhi + y0 * sinPhi;
    const y = -x0 * sinPhi + y0 * cosPhi;
    const nx = maps[o]! * x + maps[o + 1]! * y + maps[o + 2]! * z + maps[o + 9]! * m;
    const ny = maps[o + 3]! * x + maps[o + 4]! * y + maps[o + 5]! * z + maps[o + 10]! * m;
    const nz = maps[o + 6]! * x + maps[o + 7]! * y + maps[o + 8]! * z + maps[o + 11]! * m;
    // back: rotate by +φ
    mr[k] = nx * cosPhi - ny * sinPhi;
    mi[k] = nx * sinPhi + ny * cosPhi;
    mz[k] = nz;
  }
}

/**
 * One RF class's pulse on its whole state with m0 = 1 (the class playback of the fast operator and the
 * chunk shortcut): M ← Rz(φ)·(A·Rz(−φ)·M + b), as applyRf, with the map at maps[b …]; out = [x, y, z].
 */
export function rfOnState(maps: Float64Array, b: number, x0: number, y0: number, z: number, cp: number, sp: number, out: Float64Array): void {
  const x = x0 * cp + y0 * sp, y = -x0 * sp + y0 * cp;
  const nx = maps[b]! * x + maps[b + 1]! * y + maps[b + 2]! * z + maps[b + 9]!;
  const ny = maps[b + 3]! * x + maps[b + 4]! * y + maps[b + 5]! * z + maps[b + 10]!;
  out[2] = maps[b + 6]! * x + maps[b + 7]! * y + maps[b + 8]! * z + maps[b + 11]!;
  out[0] = nx * cp - ny * sp;
  out[1] = nx * sp + ny * cp;
}

/**
 * Gradient-only interval, exact in one step:
 * Mxy ← Mxy · U[iu]·V[iv]·W[iw] · D[i], Mz ← Mz·E1[i] + m0·(1 − E1[i]).
 * U, V, W are interleaved (cos, sin) tables of exp(−i2πγ̄·A·coordinate) per
 * grid index; D (interleaved) and E1 are the chunk-local relaxation and
 * off-resonance factors for this duration. The state (and d, e1) of
 * isochromat i is at index k0 + i − i0.
 */
export function applyFree(
  mr: Float64Array, mi: Float64Array, mz: Float64Array,
  m0: Float64Array, iu: Int32Array, iv: Int32Array, iw: Int32Array, i0: number, i1: number,
  tab: Float64Array, offU: number, offV: number, offW: number,
  d: Float64Array, e1: Float64Array, k0 = 0,
): void {
  for (let i = i0; i < i1; i++) {
    const k = k0 + i - i0;
    const ou = offU + 2 * iu[i]!, ov = offV + 2 * iv[i]!, ow = offW + 2 * iw[i]!;
    const ur = tab[ou]!, ui = tab[ou + 1]!, vr = tab[ov]!, vi = tab[ov + 1]!, wr = tab[ow]!, wi = tab[ow + 1]!;
    const uvr = ur * vr - ui * vi, uvi = ur * vi + ui * vr;
    const pr = uvr * wr - uvi * wi, pi = uvr * wi + uvi * wr;
    const dr = d[2 * k]!, di = d[2 * k + 1]!;
    const qr = pr * dr - pi * di, qi = pr * di + pi * dr;
    const xr = mr[k]!, xi = mi[k]!;
    mr[k] = xr * qr - xi * qi;
    mi[k] = xr * qi + xi * qr;
    const e = e1[k]!;
    mz[k] = mz[k]! * e + m0[i]! * (1 - e);
  }
}

/**
 * Longitudinal relaxation only (the transverse part is zero, after a spoil):
 * Mz ← Mz·E1[k] + m0·(1 − E1[k]), state index k = k0 + i − i0.
 */
export function applyRelax(mz: Float64Array, m0: Float64Array, i0: number, i1: number, e1: Float64Array, k0 = 0): void {
  for (let i = i0; i < i1; i++) {
    const k = k0 + i - i0;
    const e = e1[k]!;
    mz[k] = mz[k]! * e + m0[i]! * (1 - e);
  }
}

/**
 * Readout recurrence over groups: for each group g with start value z_g and
 * per-sample factor a_g, s[j] += z_g·a_g^j for j = 0 … n−1.
 * zr/zi/ar/ai hold one value per group (length groups). Four groups are kept
 * in locals at a time so the sample loop streams s once per four groups.
 */
export function readoutRecurrence(
  sr: Float64Array, si: Float64Array, n: number,
  zr: Float64Array, zi: Float64Array, ar: Float64Array, ai: Float64Array, groups: number,
): void {
  let g = 0;
  for (; g + 4 <= groups; g += 4) {
    let z0r = zr[g]!, z0i = zi[g]!, z1r = zr[g + 1]!, z1i = zi[g + 1]!;
    let z2r = zr[g + 2]!, z2i = zi[g + 2]!, z3r = zr[g + 3]!, z3i = zi[g + 3]!;
    const a0r = ar[g]!, a0i = ai[g]!, a1r = ar[g + 1]!, a1i = ai[g + 1]!;
    const a2r = ar[g + 2]!, a2i = ai[g + 2]!, a3r = ar[g + 3]!, a3i = ai[g + 3]!;
    for (let j = 0; j < n; j++) {
      sr[j] = sr[j]! + (z0r + z1r) + (z2r + z3r);
      si[j] = si[j]! + (z0i + z1i) + (z2i + z3i);
      const t0 = z0r * a0r - z0i * a0i; z0i = z0r * a0i + z0i * a0r; z0r = t0;
      const t1 = z1r * a1r - z1i * a1i; z1i = z1r * a1i + z1i * a1r; z1r = t1;
      const t2 = z2r * a2r - z2i * a2i; z2i = z2r * a2i + z2i * a2r; z2r = t2;
      const t3 = z3r * a3r - z3i * a3i; z3i = z3r * a3i + z3i * a3r; z3r = t3;
    }
  }
  for (; g < groups; g++) {
    let z0r = zr[g]!, z0i = zi[g]!;
    const a0r = ar[g]!, a0i = ai[g]!;
    for (let j = 0; j < n; j++) {
      sr[j] = sr[j]! + z0r;
      si[j] = si[j]! + z0i;
      const t0 = z0r * a0r - z0i * a0i; z0i = z0r * a0i + z0i * a0r; z0r = t0;
    }
  }
}

/**
 * Affine map of one RF pulse for spins at offset f (Hz) with rates r1, r2
 * (1/s): per step, relax dt/2, rotate about Ω = −γ·(B1x, B1y, 2πf/γ) by
 * |Ω|·dt (the Bloch equation dM/dt = γ·M×B in the rotating frame), relax
 * dt/2. Writes A (row-major) and b into out[o … o+11].
 *
 * Speed-ups, each exact in exact arithmetic: the two half relaxations
 * between consecutive steps are applied as one (factors e2², e1² and
 * recovery 1 − e1²); sin and cos of a step angle below 0.25 rad come from
 * their Taylor series to θ¹¹ / θ¹² (truncation < 1e-17 relative), above it
 * from Math.sin/cos. Checked against a direct per-isochromat simulation.
 */
export function rfAffine(
  out: Float64Array, o: number,
  b1re: Float64Array, b1im: Float64Array, dt: number, gamma: number,
  f: number, r1: number, r2: number,
): void {
  const e2 = Math.exp(-r2 * dt / 2), e1 = Math.exp(-r1 * dt / 2), rec = 1 - e1;
  const E2 = e2 * e2, E1 = e1 * e1, REC = 1 - E1;
  const wz = -2 * Math.PI * f;
  const n = b1re.length;
  // first half relaxation applied to the identity map
  let a00 = e2, a01 = 0, a02 = 0, a10 = 0, a11 = e2, a12 = 0, a20 = 0, a21 = 0, a22 = e1;
  let b0 = 0, b1 = 0, b2 = rec;
  for (let s = 0; s < n; s++) {
    if (s > 0) {
      a00 *= E2; a01 *= E2; a02 *= E2; a10 *= E2; a11 *= E2; a12 *= E2; a20 *= E1; a21 *= E1; a22 *= E1;
      b0 *= E2; b1 *= E2; b2 = b2 * E1 + REC;
    }
    const wx = -gamma * b1re[s]!, wy = -gamma * b1im[s]!;
    const w2 = wx * wx + wy * wy + wz * wz;
    if (w2 > 0) {
      const w = Math.sqrt(w2), inv = 1 / w, th = w * dt;
      const nx = wx * inv, ny = wy * inv, nz = wz * inv;
      let c: number, sn: number;
      if (th < 0.25) {
        const t2 = th * th;
        sn = th * (1 + t2 * (-1 / 6 + t2 * (1 / 120 + t2 * (-1 / 5040 + t2 * (1 / 362880 + t2 * (-1 / 39916800))))));
        c = 1 + t2 * (-1 / 2 + t2 * (1 / 24 + t2 * (-1 / 720 + t2 * (1 / 40320 + t2 * (-1 / 3628800 + t2 * (1 / 479001600))))));
      } else {
        c = Math.cos(th);
        sn = Math.sin(th);
      }
      const C = 1 - c;
      const xC = nx * C, yC = ny * C, zC = nz * C, xs = nx * sn, ys = ny * sn, zs = nz * sn;
      const r00 = c + nx * xC, r01 = nx * yC - zs, r02 = nx * zC + ys;
      const r10 = ny * xC + zs, r11 = c + ny * yC, r12 = ny * zC - xs;
      const r20 = nz * xC - ys, r21 = nz * yC + xs, r22 = c + nz * zC;
      let t0 = r00 * a00 + r01 * a10 + r02 * a20, t1 = r10 * a00 + r11 * a10 + r12 * a20, t2 = r20 * a00 + r21 * a10 + r22 * a20;
      a00 = t0; a10 = t1; a20 = t2;
      t0 = r00 * a01 + r01 * a11 + r02 * a21; t1 = r10 * a01 + r11 * a11 + r12 * a21; t2 = r20 * a01 + r21 * a11 + r22 * a21;
      a01 = t0; a11 = t1; a21 = t2;
      t0 = r00 * a02 + r01 * a12 + r02 * a22; t1 = r10 * a02 + r11 * a12 + r12 * a22; t2 = r20 * a02 + r21 * a12 + r22 * a22;
      a02 = t0; a12 = t1; a22 = t2;
      t0 = r00 * b0 + r01 * b1 + r02 * b2; t1 = r10 * b0 + r11 * b1 + r12 * b2; t2 = r20 * b0 + r21 * b1 + r22 * b2;
      b0 = t0; b1 = t1; b2 = t2;
    }
  }
  // last half relaxation
  a00 *= e2; a01 *= e2; a02 *= e2; a10 *= e2; a11 *= e2; a12 *= e2; a20 *= e1; a21 *= e1; a22 *= e1;
  b0 *= e2; b1 *= e2; b2 = b2 * e1 + rec;
  out[o] = a00; out[o + 1] = a01; out[o + 2] = a02;
  out[o + 3] = a10; out[o + 4] = a11; out[o + 5] = a12;
  out[o + 6] = a20; out[o + 7] = a21; out[o + 8] = a22;
  out[o + 9] = b0; out[o + 10] = b1; out[o + 11] = b2;
}
