/**
 * The through-slice basis of the streamed fold with sensitivities
 * (fast-stream.ts) and the projection of coil sensitivities on it, on their
 * own so the helper thread (fast-phase.ts) can project the sensitivities it
 * evaluates, with the same code (the same bits).
 */

/**
 * An orthonormal basis of R^nw for functions of the through-slice position:
 * the discrete orthogonal polynomials on the points w (Gram–Schmidt, twice,
 * of 1, x, x², … with x = w scaled to [−1, 1]; G. E. Forsythe, "Generation
 * and use of orthogonal polynomials for data-fitting with a digital
 * computer", J. SIAM 5 (1957) 74–88). Row p (psi[p·nw + c]) is ψ_p. A smooth
 * sensitivity profile has its weight in the first few; the basis is complete,
 * so keeping every term is exact.
 */
export function throughSliceBasis(w: ArrayLike<number>): Float64Array {
  const n = w.length, psi = new Float64Array(n * n);
  let lo = Infinity, hi = -Infinity;
  for (let c = 0; c < n; c++) {
    lo = Math.min(lo, w[c]!);
    hi = Math.max(hi, w[c]!);
  }
  const mid = (lo + hi) / 2, half = hi > lo ? (hi - lo) / 2 : 1;
  const v = new Float64Array(n);
  for (let p = 0; p < n; p++) {
    // x·ψ_{p−1} (three-term recurrence direction), or 1
    for (let c = 0; c < n; c++) v[c] = p === 0 ? 1 : ((w[c]! - mid) / half) * psi[(p - 1) * n + c]!;
    for (let pass = 0; pass < 2; pass++) {
      for (let k = 0; k < p; k++) {
        let d = 0;
        for (let c = 0; c < n; c++) d += psi[k * n + c]! * v[c]!;
        for (let c = 0; c < n; c++) v[c] = v[c]! - d * psi[k * n + c]!;
      }
    }
    let nn = 0;
    for (let c = 0; c < n; c++) nn += v[c]! * v[c]!;
    nn = Math.sqrt(nn);
    if (!(nn > 1e-8)) {
      // points too close for the recurrence: complete the basis with unit vectors
      for (let e = 0; e < n && !(nn > 1e-8); e++) {
        v.fill(0);
        v[e] = 1;
        for (let pass = 0; pass < 2; pass++) {
          for (let k = 0; k < p; k++) {
            let d = 0;
            for (let c = 0; c < n; c++) d += psi[k * n + c]! * v[c]!;
            for (let c = 0; c < n; c++) v[c] = v[c]! - d * psi[k * n + c]!;
          }
        }
        nn = 0;
        for (let c = 0; c < n; c++) nn += v[c]! * v[c]!;
        nn = Math.sqrt(nn);
      }
    }
    for (let c = 0; c < n; c++) psi[p * n + c] = v[c]! / nn;
  }
  return psi;
}

/**
 * mom[2·(q·nw + p)] = Σ_c ψ_p(c)·S[2·(q·nw + c)] (complex) for every coil q and term p.
 * Four terms p share each pass over a coil's S (four independent sums, each in
 * ascending c from +0: the same bits as one term at a time).
 */
export function projectThroughSlice(psi: Float64Array, S: Float64Array, coils: number, nw: number, mom: Float64Array): void {
  for (let q = 0; q < coils; q++) {
    const sq = 2 * q * nw;
    let p = 0;
    for (; p + 4 <= nw; p += 4) {
      const f0 = p * nw, f1 = f0 + nw, f2 = f1 + nw, f3 = f2 + nw;
      let ar = 0, ai = 0, br = 0, bi = 0, cr = 0, ci = 0, dr = 0, di = 0;
      for (let c = 0; c < nw; c++) {
        const xr = S[sq + 2 * c]!, xi = S[sq + 2 * c + 1]!;
        const a = psi[f0 + c]!, b = psi[f1 + c]!, cc = psi[f2 + c]!, d = psi[f3 + c]!;
        ar += a * xr;
        ai += a * xi;
        br += b * xr;
        bi += b * xi;
        cr += cc * xr;
        ci += cc * xi;
        dr += d * xr;
        di += d * xi;
      }
      const o = sq + 2 * p;
      mom[o] = ar;
      mom[o + 1] = ai;
      mom[o + 2] = br;
      mom[o + 3] = bi;
      mom[o + 4] = cr;
      mom[o + 5] = ci;
      mom[o + 6] = dr;
      mom[o + 7] = di;
    }
    for (; p < nw; p++) {
      let gr = 0, gi = 0;
      for (let c = 0; c < nw; c++) {
        const f = psi[p * nw + c]!;
        gr += f * S[sq + 2 * c]!;
        gi += f * S[sq + 2 * c + 1]!;
      }
      mom[sq + 2 * p] = gr;
      mom[sq + 2 * p + 1] = gi;
    }
  }
}

