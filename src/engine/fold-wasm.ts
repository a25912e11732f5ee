/**
 * The streamed fold's weighted sums of through-slice moments (fast-stream.ts
 * addMoments) for every coil of a column at once, as a WebAssembly SIMD
 * kernel: one f64x2 holds one complex value (re, im). For coil q and grid
 * entry (r, l) the kernel sums, in the order the terms are given,
 *   v = 0 + γ_{p0}·M_{p0}[r·L + l] + γ_{p1}·M_{p1}[r·L + l] + …
 * with each product M·γ computed as M·(γr, γr) + swap(M)·(−γi, γi): lanes
 * Mr·γr + (−(Mi·γi)) = Mr·γr − Mi·γi and Mi·γr + Mr·γi (IEEE addition is
 * commutative and x + (−y) = x − y exactly), the numbers addMoments adds. The
 * caller adds the column's sums into its grids (the same additions as
 * addMoments makes, so the same bits).
 *
 * Memory layout (bytes): the moment tables from 0 (copied once per fold);
 * the column's sums `stage`, [r][q][l] like a grid position's run; per coil q
 * its term count (i32) at counts + 4q and its terms at terms + q·recq, 48
 * bytes each: [byte offset of M_p (i32), 12 bytes unused, (γr, γr), (−γi, γi)].
 */
import {
  BR_IF, F64X2_ADD, F64X2_MUL, I32, I32_ADD, I32_LT_U, I32_MUL, V128,
  i32Const, kernelFactory, kernelModule, localGet, localSet, localTee, loop, reserveKernelMemory, simd, v128Load, v128Store,
  kernelSwitch, type Code, type Kernel,
} from "./wasm-asm.js";

// opcodes this kernel adds to wasm-asm's (WebAssembly Core Specification 2.0, 5.4.1, 5.4.6 and 5.4.8)
const IF = 0x04, ELSE = 0x05, BLOCK_TYPE_EMPTY = 0x40, END = 0x0b, I32_LOAD = 0x28, I32_NE = 0x47, I32_SHL = 0x74;
const V128_CONST = 0x0c, I8X16_SHUFFLE = 0x0d;

// parameters, then 10 i32 and 5 v128 locals
const STAGE = 0, COILS = 1, W = 2, L = 3, TERMS = 4, COUNTS = 5, RECQ = 6;
const R = 7, Q = 8, LI = 9, I = 10, NK = 11, S = 12, TP = 13, X = 14, ROWB = 15, LB = 16;
const Z = 17, G1 = 18, G2 = 19, ZERO = 20, TMP = 21;

const ADD = simd(F64X2_ADD), MUL = simd(F64X2_MUL);
const SWAP: Code = [...localTee(TMP), ...localGet(TMP), ...simd(I8X16_SHUFFLE), 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
const i32Load = (offset: number): Code => [I32_LOAD, 2, offset];

/**
 * Over every entry (r, l) of coil q: S ← first ? 0 + γ·M : S + γ·M (M at X,
 * advancing), γ·M = M·G1 + swap(M)·G2; or S ← 0 without terms. Stage entry
 * (r, q, l) at STAGE + ((r·coils + q)·L + l)·16.
 */
function sweep(kind: "first" | "next" | "zero"): Code {
  const value: Code[] = kind === "zero"
    ? [localGet(ZERO)]
    : [
        localGet(X), v128Load(0), localTee(Z), localGet(G1), MUL,
        localGet(Z), SWAP, localGet(G2), MUL, ADD,
        kind === "first" ? [...localGet(ZERO), ...ADD] : [...localGet(S), ...v128Load(0), ...ADD],
      ];
  return [
    ...i32Const(0), ...localSet(R),
    ...loop(
      // S = STAGE + (r·coils + q)·L·16
      localGet(STAGE), localGet(R), localGet(COILS), [I32_MUL], localGet(Q), [I32_ADD], localGet(LB), [I32_MUL], [I32_ADD], localSet(S),
      i32Const(0), localSet(LI),
      loop(
        localGet(S), ...value, v128Store(0),
        localGet(S), i32Const(16), [I32_ADD], localSet(S),
        ...(kind === "zero" ? [] : [localGet(X), i32Const(16), [I32_ADD], localSet(X)]),
        localGet(LI), i32Const(1), [I32_ADD], localTee(LI), localGet(L), [I32_LT_U], [BR_IF, 0],
      ),
      localGet(R), i32Const(1), [I32_ADD], localTee(R), localGet(W), [I32_LT_U], [BR_IF, 0],
    ),
  ];
}

/** One term's factors: X at its table, G1 = (γr, γr), G2 = (−γi, γi) from the record at TP. */
const termAt: Code = [
  ...localGet(TP), ...i32Load(0), ...localSet(X),
  ...localGet(TP), ...v128Load(16), ...localSet(G1),
  ...localGet(TP), ...v128Load(32), ...localSet(G2),
];

/**
 * The module's bytes: export "moments"(stage, coils, W, L, terms, counts,
 * recq); export "memory". Per coil, its first term is written over every
 * entry (0 + γ·M), each further term added in order: entry by entry the sums
 * of addMoments.
 */
export function foldMomentsModule(): Uint8Array<ArrayBuffer> {
  const body: Code = [
    ...simd(V128_CONST), ...new Array<number>(16).fill(0), ...localSet(ZERO),
    ...localGet(L), ...i32Const(4), I32_SHL, ...localSet(LB),
    ...i32Const(0), ...localSet(Q),
    ...loop(
      localGet(COUNTS), localGet(Q), i32Const(2), [I32_SHL], [I32_ADD], i32Load(0), localSet(NK),
      localGet(TERMS), localGet(Q), localGet(RECQ), [I32_MUL], [I32_ADD], localSet(TP),
      localGet(NK), i32Const(0), [I32_NE], [IF, BLOCK_TYPE_EMPTY],
      termAt, sweep("first"),
      i32Const(1), localSet(I),
      localGet(I), localGet(NK), [I32_LT_U], [IF, BLOCK_TYPE_EMPTY],
      loop(
        localGet(TP), i32Const(48), [I32_ADD], localSet(TP),
        termAt, sweep("next"),
        localGet(I), i32Const(1), [I32_ADD], localTee(I), localGet(NK), [I32_LT_U], [BR_IF, 0],
      ),
      [END],
      [ELSE], sweep("zero"), [END],
      localGet(Q), i32Const(1), [I32_ADD], localTee(Q), localGet(COILS), [I32_LT_U], [BR_IF, 0],
    ),
  ];
  return kernelModule({ exportName: "moments", params: 7, locals: [[10, I32], [5, V128]], body });
}

type MomentsFn = (stage: number, coils: number, W: number, L: number, terms: number, counts: number, recq: number) => void;

/**
 * One fold's moment sums on the SIMD kernel (an instance of its own): the
 * tables copied in once, then per column the terms of each coil and one call.
 */
export class FoldMoments {
  private readonly f64: Float64Array;
  private readonly i32: Int32Array;
  /** Double offset of each table (−1 for none). */
  readonly tableAt: Int32Array;
  private readonly stage: number;
  private readonly terms: number;
  private readonly counts: number;
  private readonly recq: number;
  private readonly n: number;

  private constructor(private readonly k: Kernel<MomentsFn>, tables: (Float64Array | null)[], private readonly coils: number, nw: number, private readonly W: number, private readonly L: number) {
    const tableLen = 2 * nw * W * L;
    let bytes = 0;
    this.tableAt = new Int32Array(tables.length).fill(-1);
    for (let i = 0; i < tables.length; i++) {
      if (!tables[i]) continue;
      this.tableAt[i] = bytes / 8;
      bytes += 8 * tableLen;
    }
    this.n = 2 * coils * W * L;
    this.stage = bytes;
    bytes += 8 * this.n;
    this.recq = 48 * nw;
    this.terms = bytes;
    bytes += this.recq * coils;
    this.counts = bytes;
    bytes += 16 * Math.ceil(coils / 4);
    this.f64 = reserveKernelMemory(k, bytes);
    this.i32 = new Int32Array(k.memory.buffer);
    for (let i = 0; i < tables.length; i++) if (tables[i]) this.f64.set(tables[i]!, this.tableAt[i]!);
  }

  /** The kernel with these tables (2·nw·W·L numbers each, as fast-stream.ts sliceMoments makes them; null entries skipped), or null where WebAssembly SIMD is unavailable. */
  static make(tables: (Float64Array | null)[], coils: number, nw: number, W: number, L: number, wasm = true): FoldMoments | null {
    const k = wasm ? kernel() : null;
    return k ? new FoldMoments(k, tables, coils, nw, W, L) : null;
  }

  /** Coil q's terms: order[0 … nk) of table `table`, γ_p at gam[2p] (as addMoments takes them). */
  setTerms(q: number, table: number, gam: Float64Array, order: Int32Array, nk: number): void {
    const f = this.f64, base = this.tableAt[table]! * 8, mStride = 16 * this.W * this.L;
    this.i32[this.counts / 4 + q] = nk;
    for (let i = 0; i < nk; i++) {
      const p = order[i]!, o = this.terms + q * this.recq + 48 * i, gr = gam[2 * p]!, gi = gam[2 * p + 1]!;
      this.i32[o / 4] = base + p * mStride;
      f[o / 8 + 2] = gr;
      f[o / 8 + 3] = gr;
      f[o / 8 + 4] = -gi;
      f[o / 8 + 5] = gi;
    }
  }

  /** Writes the column's sums of every coil to XB[ob …] (a grid position's run, [r][q][l] interleaved, not written before: the numbers 0 + v that adding them to a zeroed run gives, as no sum is −0). */
  storeInto(XB: Float64Array, ob: number): void {
    this.k.run(this.stage, this.coils, this.W, this.L, this.terms, this.counts, this.recq);
    XB.set(this.f64.subarray(this.stage / 8, this.stage / 8 + this.n), ob);
  }

  /** Adds the column's sums of every coil into XB[ob …] (a grid position's run, [r][q][l] interleaved). */
  addInto(XB: Float64Array, ob: number): void {
    this.k.run(this.stage, this.coils, this.W, this.L, this.terms, this.counts, this.recq);
    const f = this.f64, s = this.stage / 8, n = this.n;
    for (let i = 0; i < n; i++) XB[ob + i] = XB[ob + i]! + f[s + i]!;
  }
}

const newKernel = kernelFactory<MomentsFn>(foldMomentsModule, "moments");

/** An instance of its own (its own memory) for each user; the module is compiled once. */
function kernel(): Kernel<MomentsFn> | null {
  return foldWasmSwitch.on() ? newKernel() : null;
}

const foldWasmSwitch = kernelSwitch();

/** Switches the fold's SIMD kernel on or off (the TypeScript addMoments runs instead; the same bits); returns the previous setting. */
export function setFoldWasm(on: boolean): boolean {
  return foldWasmSwitch.set(on);
}
