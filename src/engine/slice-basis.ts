/**
 * The through-slice basis of the streamed fold with sensitivities
 * (fast-stream.ts) and the projection of coil sensitivities on it, on their
 * own so the helper thread (fast-phase.ts) can project the sensitivities it
 * evaluates, with the same code (the same bits).
 */
import {
  BR_IF, F64X2_ADD, F64X2_MUL, I32, I32_ADD, I32_LT_U, I32_MUL, V128,
  i32Const, kernelFactory, kernelModule, localGet, localSet, localTee, loop, reserveKernelMemory, simd, v128Load, v128Store,
  kernelSwitch, type Code, type Kernel,
} from "./wasm-asm.js";

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


// ---------------------------------------------------------------------------
// projectThroughSlice as a WebAssembly SIMD kernel, for the helper thread's
// sensitivity jobs (fast-phase.ts evalSens): one f64x2 holds one complex
// sensitivity (re, im), each ψ_p(c) a pair (ψ, ψ), so a lane pair gets
// acc + ψ·S exactly as the TypeScript sums `ar += a·xr`, `ai += a·xi` (from
// +0, in ascending c): the same bits. Memory (bytes): ψ as pairs from 0
// (16·nw² bytes), then the sensitivities of the rows (coil × column, nw
// complex values each) and their moments (nw each).

// local indices: parameters, then 9 i32 and 1 v128 locals
const K_S = 0, K_MOM = 1, K_ROWS = 2, K_NW = 3, K_PSI = 4;
const K_SP = 5, K_MP = 6, K_G = 7, K_P = 8, K_PP = 9, K_C = 10, K_X = 11, K_Y = 12, K_ROW = 13;
const K_ACC = 14;

/** The module's bytes: export "project"(s, mom, rows, nw, psi); export "memory". */
export function sliceProjectModule(): Uint8Array<ArrayBuffer> {
  const add = (a: number, b: Code): Code[] => [localGet(a), b, [I32_ADD], localSet(a)];
  const body: Code = [
    ...localGet(K_S), ...localSet(K_SP),
    ...localGet(K_MOM), ...localSet(K_MP),
    ...localGet(K_NW), ...i32Const(16), ...[I32_MUL], ...localSet(K_ROW),
    ...i32Const(0), ...localSet(K_G),
    ...loop(
      i32Const(0), localSet(K_P),
      localGet(K_PSI), localSet(K_PP),
      loop(
        [...simd(V128_CONST_OP), ...new Array<number>(16).fill(0)], localSet(K_ACC),
        i32Const(0), localSet(K_C),
        localGet(K_SP), localSet(K_X),
        localGet(K_PP), localSet(K_Y),
        loop(
          localGet(K_ACC), localGet(K_Y), v128Load(0), localGet(K_X), v128Load(0), simd(F64X2_MUL), simd(F64X2_ADD), localSet(K_ACC),
          ...add(K_X, i32Const(16)), ...add(K_Y, i32Const(16)),
          localGet(K_C), i32Const(1), [I32_ADD], localTee(K_C), localGet(K_NW), [I32_LT_U], [BR_IF, 0],
        ),
        localGet(K_MP), localGet(K_ACC), v128Store(0),
        ...add(K_MP, i32Const(16)), ...add(K_PP, localGet(K_ROW)),
        localGet(K_P), i32Const(1), [I32_ADD], localTee(K_P), localGet(K_NW), [I32_LT_U], [BR_IF, 0],
      ),
      ...add(K_SP, localGet(K_ROW)),
      localGet(K_G), i32Const(1), [I32_ADD], localTee(K_G), localGet(K_ROWS), [I32_LT_U], [BR_IF, 0],
    ),
  ];
  return kernelModule({ exportName: "project", params: 5, locals: [[9, I32], [1, V128]], body });
}

const V128_CONST_OP = 0x0c;

type ProjectFn = (s: number, mom: number, rows: number, nw: number, psi: number) => void;

/** projectThroughSlice of many coil rows at once on the SIMD kernel (an instance of its own, ψ in its memory). */
export class SliceProjector {
  private f64: Float64Array;
  private cap = 0;
  private constructor(private readonly k: Kernel<ProjectFn>, private readonly nw: number, psi: Float64Array) {
    this.f64 = reserveKernelMemory(k, 16 * nw * nw);
    for (let i = 0; i < nw * nw; i++) {
      this.f64[2 * i] = psi[i]!;
      this.f64[2 * i + 1] = psi[i]!;
    }
  }

  /** A projector for the basis psi (nw × nw), or null where WebAssembly SIMD is unavailable. */
  static make(psi: Float64Array, nw: number, wasm = true): SliceProjector | null {
    const k = wasm ? projectKernel() : null;
    return k ? new SliceProjector(k, nw, psi) : null;
  }

  /** Room for `rows` rows: the array to write their sensitivities to (at sAt(), 2·nw numbers per row) and read their moments from (at momAt()). */
  reserve(rows: number): Float64Array {
    if (rows > this.cap) {
      this.cap = rows;
      this.f64 = reserveKernelMemory(this.k, 16 * this.nw * this.nw + 2 * 16 * this.nw * rows);
    }
    return this.f64;
  }

  sAt(): number {
    return 2 * this.nw * this.nw;
  }

  momAt(): number {
    return 2 * this.nw * this.nw + 2 * this.nw * this.cap;
  }

  /** The moments of the first `rows` rows written at sAt() (reserve(rows) first). */
  run(rows: number): void {
    this.k.run(8 * this.sAt(), 8 * this.momAt(), rows, this.nw, 0);
  }
}

const newProjectKernel = kernelFactory<ProjectFn>(sliceProjectModule, "project");

function projectKernel(): Kernel<ProjectFn> | null {
  return sliceWasmSwitch.on() ? newProjectKernel() : null;
}

const sliceWasmSwitch = kernelSwitch();

/** Switches the projection's SIMD kernel on or off (projectThroughSlice runs instead; the same bits); returns the previous setting. */
export function setSliceWasm(on: boolean): boolean {
  return sliceWasmSwitch.set(on);
}
