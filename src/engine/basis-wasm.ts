/**
 * The pivoted Gram–Schmidt's sweep (fast.ts pivotedBasis): one new basis
 * vector q removed from every column y_c of nonzero residual,
 *   y_c ← y_c − q·(q^H·y_c),   norm2[c] ← ‖y_c‖²,
 * as a WebAssembly SIMD kernel with the numbers of fast.ts removeComponent
 * (its TypeScript twin). One f64x2 holds one complex value (re, im):
 * - the inner product's terms q̄·y are (qr, qr)·(yr, yi) + (qi, −qi)·(yi, yr),
 *   lanes qr·yr + qi·yi and qr·yi + (−(qi·yr)) = qr·yi − qi·yr, added to
 *   (pr, pi) in k order as the twin adds them;
 * - the update's q·(pr + i·pi) is (qr, qr)·(pr, pi) + (qi, qi)·(−pi, pr), lanes
 *   qr·pr + (−(qi·pi)) and qr·pi + qi·pr, the twin's numbers (IEEE addition
 *   is commutative, x + (−y) = x − y and (−a)·b = −(a·b) exactly);
 * - the squared norm s += r·r + i·i in k order, as the twin sums it.
 *
 * Memory layout (bytes): the columns from 0 (count × m complex values, 16 m
 * bytes each), then per k of q three vectors (qr, qr), (qi, −qi), (qi, qi)
 * (48 bytes per k), then the norms (8 bytes per column).
 */
import {
  BR_IF, F64, F64X2_ADD, F64X2_MUL, F64X2_SUB, I32, I32_ADD, I32_LT_U, I32_MUL, V128,
  f64Load, i32Const, kernelFactory, kernelModule, localGet, localSet, localTee, loop, reserveKernelMemory, simd, v128Load, v128Store,
  kernelSwitch, type Code, type Kernel,
} from "./wasm-asm.js";

// opcodes this kernel adds to wasm-asm's (WebAssembly Core Specification 2.0, 5.4.1, 5.4.6, 5.4.7 and 5.4.8)
const IF = 0x04, BLOCK_TYPE_EMPTY = 0x40, END = 0x0b, F64_STORE = 0x39, F64_CONST = 0x44, F64_NE = 0x62, F64_ADD = 0xa0;
const V128_CONST = 0x0c, I8X16_SHUFFLE = 0x0d, F64X2_EXTRACT_LANE = 0x21;

// parameters (Y, QV, NORMS, m, count), then 5 i32, 5 v128 and 1 f64 locals
const Y = 0, QV = 1, NORMS = 2, M = 3, COUNT = 4;
const C = 5, K = 6, YP = 7, QP = 8, NP = 9;
const ACC = 10, YV = 11, P2 = 12, SQ = 13, TMP = 14;
const S = 15;

const ADD = simd(F64X2_ADD), MUL = simd(F64X2_MUL), SUB = simd(F64X2_SUB);
const SWAP: Code = [...localTee(TMP), ...localGet(TMP), ...simd(I8X16_SHUFFLE), 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
const f64Store = (offset: number): Code => [F64_STORE, 3, offset];
const lane = (i: number): Code => [...simd(F64X2_EXTRACT_LANE), i];

/** v128.const of two doubles. */
function f64x2Const(a: number, b: number): Code {
  return [...simd(V128_CONST), ...new Uint8Array(new Float64Array([a, b]).buffer)];
}

function f64Const(v: number): Code {
  return [F64_CONST, ...new Uint8Array(new Float64Array([v]).buffer)];
}

/** The sweep's function (see the module comment). */
function removeSource() {
  const body: Code = [
    ...i32Const(0), ...localSet(C),
    ...localGet(Y), ...localSet(YP),
    ...localGet(NORMS), ...localSet(NP),
    ...loop(
      // a column of zero residual stays as it is (the twin skips it)
      localGet(NP), f64Load(0), f64Const(0), [F64_NE], [IF, BLOCK_TYPE_EMPTY],
      // (pr, pi) = Σ_k q̄_k·y_k in k order
      f64x2Const(0, 0), localSet(ACC),
      localGet(QV), localSet(QP),
      i32Const(0), localSet(K),
      loop(
        localGet(YP), localGet(K), i32Const(16), [I32_MUL], [I32_ADD], v128Load(0), localTee(YV),
        localGet(QP), v128Load(0), MUL,
        localGet(YV), SWAP, localGet(QP), v128Load(16), MUL, ADD,
        // t + acc: the twin's pr + (…) (IEEE addition commutes)
        localGet(ACC), ADD, localSet(ACC),
        localGet(QP), i32Const(48), [I32_ADD], localSet(QP),
        localGet(K), i32Const(1), [I32_ADD], localTee(K), localGet(M), [I32_LT_U], [BR_IF, 0],
      ),
      // P2 = (−pi, pr)
      localGet(ACC), SWAP, f64x2Const(-1, 1), MUL, localSet(P2),
      // y_k ← y_k − q_k·(pr + i·pi); s += r·r + i·i
      f64Const(0), localSet(S),
      localGet(QV), localSet(QP),
      i32Const(0), localSet(K),
      loop(
        localGet(YP), localGet(K), i32Const(16), [I32_MUL], [I32_ADD],
        localGet(YP), localGet(K), i32Const(16), [I32_MUL], [I32_ADD], v128Load(0),
        localGet(QP), v128Load(0), localGet(ACC), MUL,
        localGet(QP), v128Load(32), localGet(P2), MUL, ADD,
        SUB, localTee(YV), v128Store(0),
        localGet(YV), localGet(YV), MUL, localSet(SQ),
        localGet(S), localGet(SQ), lane(0), localGet(SQ), lane(1), [F64_ADD], [F64_ADD], localSet(S),
        localGet(QP), i32Const(48), [I32_ADD], localSet(QP),
        localGet(K), i32Const(1), [I32_ADD], localTee(K), localGet(M), [I32_LT_U], [BR_IF, 0],
      ),
      localGet(NP), localGet(S), f64Store(0),
      [END],
      localGet(YP), localGet(M), i32Const(16), [I32_MUL], [I32_ADD], localSet(YP),
      localGet(NP), i32Const(8), [I32_ADD], localSet(NP),
      localGet(C), i32Const(1), [I32_ADD], localTee(C), localGet(COUNT), [I32_LT_U], [BR_IF, 0],
    ),
  ];
  return { exportName: "remove", params: 5, locals: [[5, I32], [5, V128], [1, F64]] as [number, number][], body };
}

// "project"(PK, BV, COEF, C, R, NA): parameters, then 6 i32 and 3 v128 locals
const PK = 0, BV = 1, COEF = 2, PC = 3, PR = 4, NA = 5;
const PKI = 6, PCI = 7, PRI = 8, XP = 9, BP = 10, CP = 11;
const X = 12, SX = 13, PT = 14;

/**
 * The line factor's projection (fast.ts projectLines, twin addProjection):
 * coef[c][r] += conj(b_r(k))·P_k[c] for lines k = 0 … NA−1 in order, classes
 * c and ranks r. P_k at PK (NA rows of C complex values), per (k, r) the
 * vectors (br, br) and (bi, −bi) at BV (32 bytes each), coef at COEF (C rows of
 * R complex values). The term's lanes are br·xr + bi·xi and
 * br·xi + (−(bi·xr)) = br·xi − bi·xr, added to coef as the twin adds them.
 */
function projectSource() {
  const SWAP_X: Code = [...localTee(PT), ...localGet(PT), ...simd(I8X16_SHUFFLE), 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
  const body: Code = [
    ...i32Const(0), ...localSet(PKI),
    ...localGet(PK), ...localSet(XP),
    ...loop(
      i32Const(0), localSet(PCI),
      localGet(COEF), localSet(CP),
      loop(
        localGet(XP), v128Load(0), localTee(X), SWAP_X, localSet(SX),
        localGet(BV), localGet(PKI), localGet(PR), [I32_MUL], i32Const(32), [I32_MUL], [I32_ADD], localSet(BP),
        i32Const(0), localSet(PRI),
        loop(
          localGet(CP),
          localGet(CP), v128Load(0),
          localGet(BP), v128Load(0), localGet(X), MUL,
          localGet(BP), v128Load(16), localGet(SX), MUL, ADD,
          ADD, v128Store(0),
          localGet(CP), i32Const(16), [I32_ADD], localSet(CP),
          localGet(BP), i32Const(32), [I32_ADD], localSet(BP),
          localGet(PRI), i32Const(1), [I32_ADD], localTee(PRI), localGet(PR), [I32_LT_U], [BR_IF, 0],
        ),
        localGet(XP), i32Const(16), [I32_ADD], localSet(XP),
        localGet(PCI), i32Const(1), [I32_ADD], localTee(PCI), localGet(PC), [I32_LT_U], [BR_IF, 0],
      ),
      localGet(PKI), i32Const(1), [I32_ADD], localTee(PKI), localGet(NA), [I32_LT_U], [BR_IF, 0],
    ),
  ];
  return { exportName: "project", params: 6, locals: [[6, I32], [3, V128]] as [number, number][], body };
}

/** The module's bytes: exports "remove"(Y, QV, NORMS, m, count), "project"(PK, BV, COEF, C, R, NA) and "memory". */
export function basisRemoveModule(): Uint8Array<ArrayBuffer> {
  return kernelModule([removeSource(), projectSource()]);
}

type RemoveFn = (y: number, qv: number, norms: number, m: number, count: number) => void;
type ProjectFn = (pk: number, bv: number, coef: number, C: number, R: number, NA: number) => void;

const newKernel = kernelFactory<RemoveFn>(basisRemoveModule, "remove");
let instance: Kernel<RemoveFn> | null | undefined;
const basisWasmSwitch = kernelSwitch();

/** Switches the sweep's SIMD kernel on or off (fast.ts removeComponent runs instead; the same bits); returns the previous setting. */
export function setBasisWasm(on: boolean): boolean {
  return basisWasmSwitch.set(on);
}

/**
 * The columns of one pivoted Gram–Schmidt on the kernel (this thread's
 * instance): the columns copied in once, then one call per basis vector.
 * Null where WebAssembly SIMD is unavailable or switched off.
 */
export class BasisSweep {
  /** The columns' residuals now: column c at c·2m (interleaved), valid until the next make(). */
  readonly columns: Float64Array;

  private constructor(private readonly k: Kernel<RemoveFn>, private readonly m: number, private readonly count: number, private readonly f64: Float64Array) {
    this.columns = f64.subarray(0, 2 * m * count);
  }

  static make(y: Float64Array, m: number, count: number, wasm = true): BasisSweep | null {
    if (!wasm || !basisWasmSwitch.on()) return null;
    if (instance === undefined) instance = newKernel();
    if (!instance) return null;
    const bytes = 16 * m * count + 48 * m + 8 * count;
    const f64 = reserveKernelMemory(instance, bytes);
    f64.set(y.subarray(0, 2 * m * count), 0);
    return new BasisSweep(instance, m, count, f64);
  }

  /** Removes unit vector q (interleaved, m values) from every column of nonzero norm2, norm2 updated (as removeComponent per column). */
  remove(q: Float64Array, norm2: Float64Array): void {
    const m = this.m, count = this.count, f = this.f64, qv = 2 * m * count, nv = qv + 6 * m;
    for (let k = 0; k < m; k++) {
      const qr = q[2 * k]!, qi = q[2 * k + 1]!, o = qv + 6 * k;
      f[o] = qr;
      f[o + 1] = qr;
      f[o + 2] = qi;
      f[o + 3] = -qi;
      f[o + 4] = qi;
      f[o + 5] = qi;
    }
    f.set(norm2.subarray(0, count), nv);
    this.k.run(0, 8 * qv, 8 * nv, m, count);
    norm2.set(f.subarray(nv, nv + count));
  }

  /** Column c's residual now (interleaved, m values) into y at c·2m, every column. */
  residualsInto(y: Float64Array): void {
    y.set(this.columns, 0);
  }
}

/**
 * projectLines on the kernel (this thread's instance): coef[c·R + r] =
 * Σ_k conj(basis_r(k))·P[line_k·C + c], k in order, the numbers of fast.ts
 * addProjection. Null where WebAssembly SIMD is unavailable or switched off.
 */
export function projectOnKernel(basis: Float64Array[], P: Float64Array, lines: number[], C: number, wasm = true): Float64Array | null {
  if (!wasm || !basisWasmSwitch.on()) return null;
  if (instance === undefined) instance = newKernel();
  if (!instance) return null;
  const R = basis.length, NA = lines.length;
  const pk = 0, bv = pk + 16 * NA * C, co = bv + 32 * NA * R;
  const f = reserveKernelMemory(instance, co + 16 * C * R);
  for (let k = 0; k < NA; k++) f.set(P.subarray(2 * lines[k]! * C, 2 * (lines[k]! + 1) * C), 2 * k * C);
  for (let k = 0; k < NA; k++) {
    for (let r = 0; r < R; r++) {
      const br = basis[r]![2 * k]!, bi = basis[r]![2 * k + 1]!, o = bv / 8 + 4 * (k * R + r);
      f[o] = br;
      f[o + 1] = br;
      f[o + 2] = bi;
      f[o + 3] = -bi;
    }
  }
  f.fill(0, co / 8, co / 8 + 2 * C * R);
  (instance.exports["project"] as ProjectFn)(pk, bv, co, C, R, NA);
  return f.slice(co / 8, co / 8 + 2 * C * R);
}
