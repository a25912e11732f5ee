/**
 * The readout recurrence as a WebAssembly SIMD kernel, assembled here byte by
 * byte (no toolchain): f64x2 lanes hold two consecutive samples of one group,
 * (z·a^j, z·a^(j+1)), stepped by a² — so samples accumulate lane-wise with no
 * horizontal add — two groups at a time, summed before they are added to the
 * output. Plain IEEE double mul/add/sub (no fused multiply-add), so the bits
 * are the same on every machine. Each module has a TypeScript twin with the
 * same operations in the same order (readoutPairsScalar, rfPairsScalar): the
 * fallback with WASM off or missing, bitwise equal to it. The plain
 * TypeScript kernels readoutRecurrence and rfAffine (kernels.ts) stay the
 * oracles (they agree with these to rounding, not bitwise: the lanes step by
 * a², and the RF series runs to θ¹⁷).
 *
 * Memory layout (bytes from 0): S = sample pairs, 32 bytes per pair
 * [re_j, re_j+1, im_j, im_j+1]; then G = 48 bytes per group
 * [Re z, Re z·a, Im z, Im z·a, Re a², Im a²].
 */
import { readoutRecurrence, rfAffine } from "./kernels.js";
import { fftStepsModule } from "../recon/fft-wasm.js";
import { foldMomentsModule } from "./fold-wasm.js";
import { sliceProjectModule } from "./slice-basis.js";
import { basisRemoveModule } from "./basis-wasm.js";
import {
  BR_IF, F64X2_ADD, F64X2_DIV, F64X2_MAX, F64X2_MUL, F64X2_SPLAT, F64X2_SQRT, F64X2_SUB, I32, I32_ADD, I32_LT_U, I32_MUL, I32_SUB, V128,
  f64Load, i32Const, instantiateKernel, kernelModule, localGet, localSet, localTee, loop, reserveKernelMemory, simd, v128Load, v128Store,
  type Code, type Kernel,
} from "./wasm-asm.js";

const ADD = simd(F64X2_ADD), SUB = simd(F64X2_SUB), MUL = simd(F64X2_MUL), SPLAT = simd(F64X2_SPLAT);

/** The readout module's bytes (see the layout above): export "readout"(sOff, pairs, gOff, groups even ≥ 2, pairs ≥ 1), export "memory". */
export function readoutModule(): Uint8Array<ArrayBuffer> {
  // parameters: byte offsets of the sample pairs and the groups, their counts
  const S_OFF = 0, PAIRS = 1, G_OFF = 2, GROUPS = 3;
  // i32 locals: group, remaining pairs, sample pointer, group pointer
  const G = 4, J = 5, SP = 6, GP = 7;
  // v128 locals: two groups' (z, z·a) lanes, their a² (splat), a temporary
  const Z0R = 8, Z0I = 9, Z1R = 10, Z1I = 11, A0R = 12, A0I = 13, A1R = 14, A1I = 15, T = 16;
  /** z ← z·a (complex, lane-wise): t = zr·ar − zi·ai; zi = zr·ai + zi·ar; zr = t. */
  const cmul = (zr: number, zi: number, ar: number, ai: number): Code => [
    ...localGet(zr), ...localGet(ar), ...MUL, ...localGet(zi), ...localGet(ai), ...MUL, ...SUB, ...localSet(T),
    ...localGet(zr), ...localGet(ai), ...MUL, ...localGet(zi), ...localGet(ar), ...MUL, ...ADD, ...localSet(zi),
    ...localGet(T), ...localSet(zr),
  ];
  /** S[offset] ← S[offset] + (a + b), at the sample pointer. */
  const accumulate = (offset: number, a: number, b: number): Code => [
    ...localGet(SP), ...localGet(SP), ...v128Load(offset), ...localGet(a), ...localGet(b), ...ADD, ...ADD, ...v128Store(offset),
  ];
  const body: Code = [
    ...i32Const(0), ...localSet(G),
    ...loop( // over group pairs
      [...localGet(G_OFF), ...localGet(G), ...i32Const(48), I32_MUL, I32_ADD, ...localSet(GP)],
      [...localGet(GP), ...v128Load(0), ...localSet(Z0R)],
      [...localGet(GP), ...v128Load(16), ...localSet(Z0I)],
      [...localGet(GP), ...f64Load(32), ...SPLAT, ...localSet(A0R)],
      [...localGet(GP), ...f64Load(40), ...SPLAT, ...localSet(A0I)],
      [...localGet(GP), ...v128Load(48), ...localSet(Z1R)],
      [...localGet(GP), ...v128Load(64), ...localSet(Z1I)],
      [...localGet(GP), ...f64Load(80), ...SPLAT, ...localSet(A1R)],
      [...localGet(GP), ...f64Load(88), ...SPLAT, ...localSet(A1I)],
      [...localGet(S_OFF), ...localSet(SP)],
      [...localGet(PAIRS), ...localSet(J)],
      loop( // over sample pairs
        accumulate(0, Z0R, Z1R),
        accumulate(16, Z0I, Z1I),
        cmul(Z0R, Z0I, A0R, A0I),
        cmul(Z1R, Z1I, A1R, A1I),
        [...localGet(SP), ...i32Const(32), I32_ADD, ...localSet(SP)],
        [...localGet(J), ...i32Const(1), I32_SUB, ...localTee(J), BR_IF, 0], // while --j ≠ 0
      ),
      [...localGet(G), ...i32Const(2), I32_ADD, ...localTee(G), ...localGet(GROUPS), I32_LT_U, BR_IF, 0], // while (g += 2) < groups
    ),
  ];
  return kernelModule({ exportName: "readout", params: 4, locals: [[4, I32], [9, V128]], body });
}

/**
 * The readout module's arithmetic in TypeScript, on the same memory layout
 * (offsets and counts in f64 words here), lane by lane with the same
 * operations in the same order: the fallback where WebAssembly SIMD is off
 * or missing, bitwise equal to the kernel (IEEE-754 double add, sub and mul,
 * each correctly rounded, in both; JavaScript never fuses a multiply-add).
 */
export function readoutPairsScalar(m: Float64Array, sOff: number, pairs: number, gOff: number, groups: number): void {
  for (let g = 0; g < groups; g += 2) {
    const q = gOff + 6 * g;
    const a0r = m[q + 4]!, a0i = m[q + 5]!, a1r = m[q + 10]!, a1i = m[q + 11]!;
    for (let lane = 0; lane < 2; lane++) {
      let z0r = m[q + lane]!, z0i = m[q + 2 + lane]!, z1r = m[q + 6 + lane]!, z1i = m[q + 8 + lane]!;
      for (let p = 0, s = sOff + lane; p < pairs; p++, s += 4) {
        m[s] = m[s]! + (z0r + z1r);
        m[s + 2] = m[s + 2]! + (z0i + z1i);
        let t = z0r * a0r - z0i * a0i;
        z0i = z0r * a0i + z0i * a0r;
        z0r = t;
        t = z1r * a1r - z1i * a1i;
        z1i = z1r * a1i + z1i * a1r;
        z1r = t;
      }
    }
  }
}

/** Every hand-assembled module of the engine, by name (test/engine-wasm.test.ts validates each). */
export const WASM_MODULES: Record<string, () => Uint8Array<ArrayBuffer>> = { readout: () => readoutModule(), rf: () => rfModule(), fftSteps: () => fftStepsModule(), foldMoments: () => foldMomentsModule(), sliceProject: () => sliceProjectModule(), basisRemove: () => basisRemoveModule() };

type ReadoutFn = (sOff: number, pairs: number, gOff: number, groups: number) => void;
let kernel: Kernel<ReadoutFn> | null | undefined;

/** The readout SIMD kernel of this thread, or null where WebAssembly SIMD is unavailable or `enabled` is false (the engine's `wasm` option). */
export function wasmKernel(enabled = true): Kernel<ReadoutFn> | null {
  if (!enabled) return null;
  if (kernel === undefined) kernel = instantiateKernel<ReadoutFn>(readoutModule(), "readout");
  return kernel;
}

/** Memory of the TypeScript twins (this thread), grown on demand. */
let twinMemory = new Float64Array(0);
function twinWords(words: number): Float64Array {
  if (twinMemory.length < words) twinMemory = new Float64Array(Math.max(words, 2 * twinMemory.length));
  return twinMemory;
}

/**
 * Same contract as {@link readoutRecurrence} — for each group g,
 * s[j] += z_g·a_g^j, j = 0 … n−1 — on the SIMD kernel when available, else
 * on its TypeScript twin (readoutPairsScalar): the same bits either way.
 * Lanes step by a_g², so rounding differs from readoutRecurrence (the
 * oracle, and the kernel for n ≤ 1) at the 1e-16 level per step.
 */
export function readoutRecurrenceFast(
  sr: Float64Array, si: Float64Array, n: number,
  zr: Float64Array, zi: Float64Array, ar: Float64Array, ai: Float64Array, groups: number, useWasm = true,
): void {
  if (groups === 0 || n <= 1) {
    readoutRecurrence(sr, si, n, zr, zi, ar, ai, groups);
    return;
  }
  const k = wasmKernel(useWasm);
  const pairs = (n + 1) >> 1, gEven = groups + (groups & 1);
  const sWords = 4 * pairs, words = sWords + 6 * gEven;
  const m = k ? reserveKernelMemory(k, words * 8) : twinWords(words);
  m.fill(0, 0, sWords);
  let o = sWords;
  for (let g = 0; g < groups; g++, o += 6) {
    const a = ar[g]!, b = ai[g]!, x = zr[g]!, y = zi[g]!;
    m[o] = x;
    m[o + 1] = x * a - y * b;
    m[o + 2] = y;
    m[o + 3] = x * b + y * a;
    m[o + 4] = a * a - b * b;
    m[o + 5] = 2 * a * b;
  }
  if (groups & 1) m.fill(0, o, o + 6);
  if (k) k.run(0, pairs, sWords * 8, gEven);
  else readoutPairsScalar(m, 0, pairs, sWords, gEven);
  for (let j = 0, q = 0; j < n; j += 2, q += 4) {
    sr[j] = sr[j]! + m[q]!;
    si[j] = si[j]! + m[q + 2]!;
    if (j + 1 < n) {
      sr[j + 1] = sr[j + 1]! + m[q + 1]!;
      si[j + 1] = si[j + 1]! + m[q + 3]!;
    }
  }
}

/** Names of the readout and RF kernels this thread uses; part of a result's definition (recorded for shards). */
export function readoutKernelName(useWasm = true): string {
  return (wasmKernel(useWasm) ? "readout wasm-simd-f64x2" : "readout scalar") + (wasmRfKernel(useWasm) ? ", rf wasm-simd-f64x2" : ", rf scalar");
}

// ---------------------------------------------------------------------------
// RF affine maps, two isochromat classes per f64x2 lane pair.
//
// Per step, for both lanes at once: relax over dt (factors E2, E1, recovery
// REC), then rotate by θ = |Ω|·dt about Ω = (wx, wy, wz) (Rodrigues), with
// sin θ and cos θ from their Taylor series to θ¹⁷ / θ¹⁸ (|θ| ≤ 1: truncation
// below 1e-17 relative). The caller starts from a state whose first full
// relaxation gives the half-relaxed identity and finishes with the last half
// relaxation, so the map is rfAffine's in exact arithmetic.
//
// Pair block (16-byte slots): 0 wz, 1 wz², 2 E2, 3 E1, 4 REC, 5 dt, 6 one,
// 7 tiny, 8–19 state a00 a01 a02 a10 a11 a12 a20 a21 a22 b0 b1 b2,
// 20–28 sin coefficients 1/3!…1/17! (signed), 29–37 cos 1/2!…1/18!.
// Steps: wx, wy (f64) interleaved, 16 bytes per step.

const SIN_C = [-1 / 6, 1 / 120, -1 / 5040, 1 / 362880, -1 / 39916800, 1 / 6227020800, -1 / 1307674368000, 1 / 355687428096000, -1 / 121645100408832000];
const COS_C = [-1 / 2, 1 / 24, -1 / 720, 1 / 40320, -1 / 3628800, 1 / 479001600, -1 / 87178291200, 1 / 20922789888000, -1 / 6402373705728000];

/** The RF module's bytes (see the layout above): export "rf"(pW, n ≥ 1, pP), export "memory". */
export function rfModule(): Uint8Array<ArrayBuffer> {
  // expression builders: each returns the code that leaves its value on the stack
  const get = localGet, set = (i: number, e: Code): Code => [...e, ...localSet(i)];
  const bin = (op: number) => (a: Code, b: Code): Code => [...a, ...b, ...simd(op)];
  const mul = bin(F64X2_MUL), add = bin(F64X2_ADD), sub = bin(F64X2_SUB), div = bin(F64X2_DIV), max = bin(F64X2_MAX);
  const sqrt = (a: Code): Code => [...a, ...simd(F64X2_SQRT)];
  const load = (addr: Code, off: number): Code => [...addr, ...v128Load(off)];
  const splat = (addr: Code, off: number): Code => [...addr, ...f64Load(off), ...SPLAT];
  // parameters: 0 pW (step pointer), 1 n (steps), 2 pP (pair block); i32 locals 3 p, 4 j; v128 locals from 5
  const PW = 0, N = 1, PP = 2, STEP = 3, J = 4;
  let next = 5;
  const v = () => next++;
  const wz = v(), wz2 = v(), E2 = v(), E1 = v(), REC = v(), dt = v(), one = v(), tiny = v();
  const st = Array.from({ length: 12 }, v);
  const sc = Array.from({ length: 9 }, v), cc = Array.from({ length: 9 }, v);
  const wx = v(), wy = v(), w = v(), inv = v(), th = v(), t2 = v(), sn = v(), c = v(), C = v();
  const nx = v(), ny = v(), nz = v(), xC = v(), yC = v(), zC = v(), xs = v(), ys = v(), zs = v();
  const r = Array.from({ length: 9 }, v);
  const t = Array.from({ length: 3 }, v);
  const vectors = next - 5;
  const P = get(PP);
  const body: Code = [];
  const emit = (...es: Code[]) => { for (const e of es) body.push(...e); };
  const step: Code[] = [];
  const emitStep = (...es: Code[]) => { step.push(...es); };
  // constants and state
  [wz, wz2, E2, E1, REC, dt, one, tiny].forEach((l, k) => emit(set(l, load(P, 16 * k))));
  st.forEach((l, k) => emit(set(l, load(P, 16 * (8 + k)))));
  sc.forEach((l, k) => emit(set(l, load(P, 16 * (20 + k)))));
  cc.forEach((l, k) => emit(set(l, load(P, 16 * (29 + k)))));
  emit(set(STEP, get(PW)), set(J, get(N)));
  // one step: relax over dt
  for (let k = 0; k < 6; k++) emitStep(set(st[k]!, mul(get(st[k]!), get(E2))));
  for (let k = 6; k < 9; k++) emitStep(set(st[k]!, mul(get(st[k]!), get(E1))));
  emitStep(set(st[9]!, mul(get(st[9]!), get(E2))), set(st[10]!, mul(get(st[10]!), get(E2))));
  emitStep(set(st[11]!, add(mul(get(st[11]!), get(E1)), get(REC))));
  // axis and angle
  emitStep(set(wx, splat(get(STEP), 0)), set(wy, splat(get(STEP), 8)));
  emitStep(set(w, sqrt(max(add(add(mul(get(wx), get(wx)), mul(get(wy), get(wy))), get(wz2)), get(tiny)))));
  emitStep(set(inv, div(get(one), get(w))), set(th, mul(get(w), get(dt))), set(t2, mul(get(th), get(th))));
  // sin θ = θ(1 + t2(s3 + t2(s5 + …))), cos θ = 1 + t2(c2 + t2(c4 + …))
  let hs: Code = get(sc[8]!), hc: Code = get(cc[8]!);
  for (let k = 7; k >= 0; k--) {
    hs = add(get(sc[k]!), mul(get(t2), hs));
    hc = add(get(cc[k]!), mul(get(t2), hc));
  }
  emitStep(set(sn, mul(get(th), add(get(one), mul(get(t2), hs)))));
  emitStep(set(c, add(get(one), mul(get(t2), hc))));
  emitStep(set(C, sub(get(one), get(c))));
  emitStep(set(nx, mul(get(wx), get(inv))), set(ny, mul(get(wy), get(inv))), set(nz, mul(get(wz), get(inv))));
  emitStep(set(xC, mul(get(nx), get(C))), set(yC, mul(get(ny), get(C))), set(zC, mul(get(nz), get(C))));
  emitStep(set(xs, mul(get(nx), get(sn))), set(ys, mul(get(ny), get(sn))), set(zs, mul(get(nz), get(sn))));
  emitStep(
    set(r[0]!, add(get(c), mul(get(nx), get(xC)))), set(r[1]!, sub(mul(get(nx), get(yC)), get(zs))), set(r[2]!, add(mul(get(nx), get(zC)), get(ys))),
    set(r[3]!, add(mul(get(ny), get(xC)), get(zs))), set(r[4]!, add(get(c), mul(get(ny), get(yC)))), set(r[5]!, sub(mul(get(ny), get(zC)), get(xs))),
    set(r[6]!, sub(mul(get(nz), get(xC)), get(ys))), set(r[7]!, add(mul(get(nz), get(yC)), get(xs))), set(r[8]!, add(get(c), mul(get(nz), get(zC)))),
  );
  // columns of [A | b]: (a0k, a1k, a2k) for k = 0, 1, 2 and (b0, b1, b2)
  const cols = [[st[0]!, st[3]!, st[6]!], [st[1]!, st[4]!, st[7]!], [st[2]!, st[5]!, st[8]!], [st[9]!, st[10]!, st[11]!]];
  for (const col of cols) {
    for (let row = 0; row < 3; row++) {
      emitStep(set(t[row]!, add(add(mul(get(r[3 * row]!), get(col[0]!)), mul(get(r[3 * row + 1]!), get(col[1]!))), mul(get(r[3 * row + 2]!), get(col[2]!)))));
    }
    for (let row = 0; row < 3; row++) emitStep(set(col[row]!, get(t[row]!)));
  }
  emitStep([...get(STEP), ...i32Const(16), I32_ADD, ...localSet(STEP)]); // next step
  emitStep([...get(J), ...i32Const(1), I32_SUB, ...localTee(J), BR_IF, 0]); // while --j ≠ 0
  emit(loop(...step));
  st.forEach((l, k) => emit([...P, ...get(l), ...v128Store(16 * (8 + k))]));
  return kernelModule({ exportName: "rf", params: 3, locals: [[2, I32], [vectors, V128]], body });
}

/**
 * The RF module's arithmetic in TypeScript, on the same memory layout
 * (pointers in f64 words here), each lane on its own with the same
 * operations in the same order (sqrt and division are correctly rounded in
 * both): the fallback where WebAssembly SIMD is off or missing, bitwise
 * equal to the kernel.
 */
export function rfPairsScalar(m: Float64Array, pW: number, n: number, pP: number): void {
  const st = new Float64Array(12), sc = new Float64Array(9), cc = new Float64Array(9);
  for (let lane = 0; lane < 2; lane++) {
    const slot = (k: number) => pP + 2 * k + lane;
    const wz = m[slot(0)]!, wz2 = m[slot(1)]!, E2 = m[slot(2)]!, E1 = m[slot(3)]!, REC = m[slot(4)]!, dt = m[slot(5)]!, one = m[slot(6)]!, tiny = m[slot(7)]!;
    for (let k = 0; k < 12; k++) st[k] = m[slot(8 + k)]!;
    for (let k = 0; k < 9; k++) {
      sc[k] = m[slot(20 + k)]!;
      cc[k] = m[slot(29 + k)]!;
    }
    let a00 = st[0]!, a01 = st[1]!, a02 = st[2]!, a10 = st[3]!, a11 = st[4]!, a12 = st[5]!, a20 = st[6]!, a21 = st[7]!, a22 = st[8]!;
    let b0 = st[9]!, b1 = st[10]!, b2 = st[11]!;
    for (let j = 0, p = pW; j < n; j++, p += 2) {
      a00 = a00 * E2; a01 = a01 * E2; a02 = a02 * E2; a10 = a10 * E2; a11 = a11 * E2; a12 = a12 * E2;
      a20 = a20 * E1; a21 = a21 * E1; a22 = a22 * E1;
      b0 = b0 * E2; b1 = b1 * E2; b2 = b2 * E1 + REC;
      const wx = m[p]!, wy = m[p + 1]!;
      const w = Math.sqrt(Math.max(wx * wx + wy * wy + wz2, tiny));
      const inv = one / w, th = w * dt, t2 = th * th;
      let hs = sc[8]!, hc = cc[8]!;
      for (let k = 7; k >= 0; k--) {
        hs = sc[k]! + t2 * hs;
        hc = cc[k]! + t2 * hc;
      }
      const sn = th * (one + t2 * hs), c = one + t2 * hc, C = one - c;
      const nx = wx * inv, ny = wy * inv, nz = wz * inv;
      const xC = nx * C, yC = ny * C, zC = nz * C, xs = nx * sn, ys = ny * sn, zs = nz * sn;
      const r00 = c + nx * xC, r01 = nx * yC - zs, r02 = nx * zC + ys;
      const r10 = ny * xC + zs, r11 = c + ny * yC, r12 = ny * zC - xs;
      const r20 = nz * xC - ys, r21 = nz * yC + xs, r22 = c + nz * zC;
      let t0 = r00 * a00 + r01 * a10 + r02 * a20, t1 = r10 * a00 + r11 * a10 + r12 * a20, t2c = r20 * a00 + r21 * a10 + r22 * a20;
      a00 = t0; a10 = t1; a20 = t2c;
      t0 = r00 * a01 + r01 * a11 + r02 * a21; t1 = r10 * a01 + r11 * a11 + r12 * a21; t2c = r20 * a01 + r21 * a11 + r22 * a21;
      a01 = t0; a11 = t1; a21 = t2c;
      t0 = r00 * a02 + r01 * a12 + r02 * a22; t1 = r10 * a02 + r11 * a12 + r12 * a22; t2c = r20 * a02 + r21 * a12 + r22 * a22;
      a02 = t0; a12 = t1; a22 = t2c;
      t0 = r00 * b0 + r01 * b1 + r02 * b2; t1 = r10 * b0 + r11 * b1 + r12 * b2; t2c = r20 * b0 + r21 * b1 + r22 * b2;
      b0 = t0; b1 = t1; b2 = t2c;
    }
    const out = [a00, a01, a02, a10, a11, a12, a20, a21, a22, b0, b1, b2];
    for (let k = 0; k < 12; k++) m[slot(8 + k)] = out[k]!;
  }
}

type RfFn = (pW: number, n: number, pP: number) => void;
let rfKernel: Kernel<RfFn> | null | undefined;

/** The SIMD RF kernel of this thread, or null (no WebAssembly SIMD, or `enabled` false). */
export function wasmRfKernel(enabled = true): Kernel<RfFn> | null {
  if (!enabled) return null;
  if (rfKernel === undefined) rfKernel = instantiateKernel<RfFn>(rfModule(), "rf");
  return rfKernel;
}

/**
 * RF affine maps (see rfAffine) of `count` classes at offsets f[k] (Hz) and
 * rates r1[k], r2[k] (1/s), written to out at o0 + 12·k. A class whose
 * largest step angle is at most 1 rad runs on the SIMD kernel (paired with
 * the next such class, or with itself), any other on the scalar rfAffine.
 * SIMD lanes do not interact, so each class's bits depend on that class
 * alone — not on its partner nor on how classes are split among threads.
 */
export function rfAffineMany(
  out: Float64Array, o0: number, count: number,
  f: ArrayLike<number>, r1: ArrayLike<number>, r2: ArrayLike<number>,
  b1re: Float64Array, b1im: Float64Array, dt: number, gamma: number, useWasm = true,
): void {
  const k = wasmRfKernel(useWasm);
  const n = b1re.length;
  if (n === 0) {
    for (let c = 0; c < count; c++) rfAffine(out, o0 + 12 * c, b1re, b1im, dt, gamma, f[c]!, r1[c]!, r2[c]!);
    return;
  }
  const P = 2 * n; // pair block after the steps, in f64 words
  const words = P + 2 * 38;
  const m = k ? reserveKernelMemory(k, words * 8) : twinWords(words);
  let b1max = 0;
  for (let s = 0; s < n; s++) {
    const wx = -gamma * b1re[s]!, wy = -gamma * b1im[s]!;
    m[2 * s] = wx;
    m[2 * s + 1] = wy;
    b1max = Math.max(b1max, wx * wx + wy * wy);
  }
  for (let q = 0; q < 9; q++) {
    m[P + 2 * (20 + q)] = m[P + 2 * (20 + q) + 1] = SIN_C[q]!;
    m[P + 2 * (29 + q)] = m[P + 2 * (29 + q) + 1] = COS_C[q]!;
  }
  const lim = 1 / (dt * dt);
  const lane = [0, 0], e2 = [0, 0], e1 = [0, 0], rec = [0, 0];
  const runPair = (cA: number, cB: number) => {
    lane[0] = cA;
    lane[1] = cB;
    for (let l = 0; l < 2; l++) {
      const c = lane[l]!, wz = -2 * Math.PI * f[c]!;
      e2[l] = Math.exp((-r2[c]! * dt) / 2);
      e1[l] = Math.exp((-r1[c]! * dt) / 2);
      rec[l] = 1 - e1[l]!;
      const E2 = e2[l]! * e2[l]!, E1 = e1[l]! * e1[l]!, REC = 1 - E1;
      const vals = [wz, wz * wz, E2, E1, REC, dt, 1, 1e-300];
      for (let q = 0; q < 8; q++) m[P + 2 * q + l] = vals[q]!;
      // start so that the first full relaxation gives diag(e2, e2, e1) and b = (0, 0, rec)
      const st = [1 / e2[l]!, 0, 0, 0, 1 / e2[l]!, 0, 0, 0, 1 / e1[l]!, 0, 0, (rec[l]! - REC) / E1];
      for (let q = 0; q < 12; q++) m[P + 2 * (8 + q) + l] = st[q]!;
    }
    if (k) k.run(0, n, P * 8);
    else rfPairsScalar(m, 0, n, P);
    for (let l = 0; l < (cA === cB ? 1 : 2); l++) {
      const o = o0 + 12 * lane[l]!, a = e2[l]!, b = e1[l]!;
      for (let q = 0; q < 6; q++) out[o + q] = m[P + 2 * (8 + q) + l]! * a;
      for (let q = 6; q < 9; q++) out[o + q] = m[P + 2 * (8 + q) + l]! * b;
      out[o + 9] = m[P + 2 * 17 + l]! * a;
      out[o + 10] = m[P + 2 * 18 + l]! * a;
      out[o + 11] = m[P + 2 * 19 + l]! * b + rec[l]!;
    }
  };
  let held = -1;
  for (let c = 0; c < count; c++) {
    const wz = 2 * Math.PI * f[c]!;
    if (b1max + wz * wz > lim) {
      rfAffine(out, o0 + 12 * c, b1re, b1im, dt, gamma, f[c]!, r1[c]!, r2[c]!);
      continue;
    }
    if (held < 0) held = c;
    else {
      runPair(held, c);
      held = -1;
    }
  }
  if (held >= 0) runPair(held, held);
}
