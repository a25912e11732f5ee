/**
 * The twiddled radix-4 steps of fft.js's power-of-two transform (every step
 * after the first) as a WebAssembly SIMD kernel, for FFTPlan.forwardBatch:
 * one f64x2 lane pair holds one complex value (re, im). Plain IEEE double
 * mul/add/sub (no fused multiply-add), and each output is the same sum of the
 * same products as in radix4Forward (fft.ts), so the bits are those of the
 * TypeScript steps (its twin and fallback): for a twiddle t = (tr, ti) the
 * product B·t is computed as B·(tr, tr) + swap(B)·(−ti, ti), whose lanes are
 * Br·tr + (−(Bi·ti)) = Br·tr − Bi·ti and Bi·tr + Br·ti (IEEE addition is
 * commutative and x + (−y) = x − y exactly); likewise
 * (T1r + T3i, T1i − T3r) = T1 + swap(T3)·(1, −1).
 *
 * Memory layout (bytes from 0): the twiddles, 32 bytes per complex index j of
 * fft.js's table, [tr, tr, −ti, ti]; then the buffers, each 16·n bytes of
 * interleaved complex values, transformed in place.
 */
import {
  BR_IF, F64X2_ADD, F64X2_MUL, F64X2_SUB, I32, I32_ADD, I32_MUL, I32_SUB, I32_LT_U, V128,
  i32Const, kernelFactory, kernelModule, localGet, localSet, localTee, loop, reserveKernelMemory, simd, v128Load, v128Store,
  type Code, type Kernel,
} from "../engine/wasm-asm.js";

// numeric and vector opcodes this kernel adds to wasm-asm's (WebAssembly Core Specification 2.0, 5.4.7 and 5.4.8)
const I32_NE = 0x47, I32_GE_U = 0x4f, I32_DIV_U = 0x6e, I32_SHL = 0x74, I32_SHR_U = 0x76;
const V128_CONST = 0x0c, I8X16_SHUFFLE = 0x0d;

// local indices: the parameters, then 11 i32 and 11 v128 locals
const OUT = 0, COUNT = 1, SIZEB = 2, STEP0 = 3, TW = 4;
const BUF = 5, STEP = 6, LENB = 7, QB = 8, G0 = 9, A = 10, LIMIT = 11, K = 12, END_ = 13, NB = 14, T = 15;
const VA = 16, VB = 17, VC = 18, VD = 19, T0 = 20, T1 = 21, T2 = 22, T3 = 23, S3 = 24, SGN = 25, TMP = 26;

const ADD = simd(F64X2_ADD), SUB = simd(F64X2_SUB), MUL = simd(F64X2_MUL);
/** The vector on the stack with its two f64 lanes exchanged (through the temporary TMP). */
const SWAP: Code = [...localTee(TMP), ...localGet(TMP), ...simd(I8X16_SHUFFLE), 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];

/** f64x2 (1, −1) as the 16 little-endian bytes of v128.const. */
const SIGN_BYTES = [0, 0, 0, 0, 0, 0, 0xf0, 0x3f, 0, 0, 0, 0, 0, 0, 0xf0, 0xbf];

/** v ← v·(tr, tr) + swap(v)·(−ti, ti), the twiddles at the address in local `at`. */
function twiddle(v: number, at: number): Code {
  return [
    ...localGet(v), ...localGet(at), ...v128Load(0), ...MUL,
    ...localGet(v), ...SWAP, ...localGet(at), ...v128Load(16), ...MUL,
    ...ADD, ...localSet(v),
  ];
}

/**
 * The module's bytes: export "steps"(out, count, sizeBytes, step0, tw): for
 * each of `count` buffers of sizeBytes bytes from byte `out`, fft.js's
 * radix-4 steps from step0 (≥ 2, in doubles of the interleaved table) down
 * to 2, in place; export "memory".
 */
export function fftStepsModule(): Uint8Array<ArrayBuffer> {
  const body: Code = [
    ...v128Const(SIGN_BYTES), ...localSet(SGN),
    ...localGet(OUT), ...localSet(BUF),
    ...localGet(COUNT), ...localSet(NB),
    ...loop(
      ...[localGet(STEP0), localSet(STEP)],
      ...[localGet(BUF), localGet(SIZEB), [I32_ADD], localSet(END_)],
      loop(
        // len (doubles) = (size / step)·2, as bytes ·8; q = len / 4
        ...[localGet(SIZEB), localGet(STEP), [I32_DIV_U], i32Const(1), [I32_SHL], localTee(LENB), i32Const(2), [I32_SHR_U], localSet(QB)],
        ...[localGet(BUF), localSet(G0)],
        loop(
          ...[localGet(G0), localTee(A), localGet(QB), [I32_ADD], localSet(LIMIT), i32Const(0), localSet(K)],
          loop(
            // B, C, D at A + q, A + 2q, A + 3q
            ...[localGet(A), localGet(QB), [I32_ADD], v128Load(0), localSet(VB)],
            ...[localGet(A), localGet(QB), i32Const(1), [I32_SHL], [I32_ADD], v128Load(0), localSet(VC)],
            ...[localGet(A), localGet(QB), i32Const(3), [I32_MUL], [I32_ADD], v128Load(0), localSet(VD)],
            // twiddles of table[k], table[2k], table[3k]: 32 bytes per complex index k/2
            ...[localGet(TW), localGet(K), i32Const(4), [I32_SHL], [I32_ADD], localSet(T)],
            twiddle(VB, T),
            ...[localGet(TW), localGet(K), i32Const(5), [I32_SHL], [I32_ADD], localSet(T)],
            twiddle(VC, T),
            ...[localGet(TW), localGet(K), i32Const(48), [I32_MUL], [I32_ADD], localSet(T)],
            twiddle(VD, T),
            ...[localGet(A), v128Load(0), localSet(VA)],
            ...[localGet(VA), localGet(VC), ADD, localSet(T0)],
            ...[localGet(VA), localGet(VC), SUB, localSet(T1)],
            ...[localGet(VB), localGet(VD), ADD, localSet(T2)],
            ...[localGet(VB), localGet(VD), SUB, localSet(T3)],
            ...[localGet(T3), SWAP, localGet(SGN), MUL, localSet(S3)],
            ...[localGet(A), localGet(T0), localGet(T2), ADD, v128Store(0)],
            ...[localGet(A), localGet(QB), [I32_ADD], localGet(T1), localGet(S3), ADD, v128Store(0)],
            ...[localGet(A), localGet(QB), i32Const(1), [I32_SHL], [I32_ADD], localGet(T0), localGet(T2), SUB, v128Store(0)],
            ...[localGet(A), localGet(QB), i32Const(3), [I32_MUL], [I32_ADD], localGet(T1), localGet(S3), SUB, v128Store(0)],
            ...[localGet(K), localGet(STEP), [I32_ADD], localSet(K)],
            ...[localGet(A), i32Const(16), [I32_ADD], localTee(A), localGet(LIMIT), [I32_LT_U], [BR_IF, 0]],
          ),
          ...[localGet(G0), localGet(LENB), [I32_ADD], localTee(G0), localGet(END_), [I32_LT_U], [BR_IF, 0]],
        ),
        ...[localGet(STEP), i32Const(2), [I32_SHR_U], localTee(STEP), i32Const(2), [I32_GE_U], [BR_IF, 0]],
      ),
      ...[localGet(BUF), localGet(SIZEB), [I32_ADD], localSet(BUF)],
      ...[localGet(NB), i32Const(1), [I32_SUB], localTee(NB), i32Const(0), [I32_NE], [BR_IF, 0]],
    ),
  ].flat();
  return kernelModule({ exportName: "steps", params: 5, locals: [[11, I32], [11, V128]], body });
}

function v128Const(bytes: number[]): Code {
  return [...simd(V128_CONST), ...bytes];
}

type StepsFn = (out: number, count: number, sizeBytes: number, step0: number, tw: number) => void;

const newKernel = kernelFactory<StepsFn>(fftStepsModule, "steps");

/** The steps kernel of one plan: its own memory holding the twiddles, then `buffers` buffers of 2n doubles. */
export interface FftSteps {
  kernel: Kernel<StepsFn>;
  /** Byte offset of the first buffer. */
  bufBytes: number;
}

/** A steps kernel for n-point transforms with fft.js's `table` (2n doubles) and room for `buffers` buffers; null where WebAssembly SIMD is unavailable. */
export function fftSteps(table: Float64Array, n: number, buffers: number): FftSteps | null {
  const kernel = newKernel();
  if (!kernel) return null;
  const bufBytes = 32 * n;
  const f64 = reserveKernelMemory(kernel, bufBytes + buffers * 16 * n);
  for (let j = 0; j < n; j++) {
    const tr = table[2 * j]!, ti = table[2 * j + 1]!;
    f64[4 * j] = tr;
    f64[4 * j + 1] = tr;
    f64[4 * j + 2] = -ti;
    f64[4 * j + 3] = ti;
  }
  return { kernel, bufBytes };
}
