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
  type Code, type Kernel, type KernelSource,
} from "../engine/wasm-asm.js";

// numeric and vector opcodes this kernel adds to wasm-asm's (WebAssembly Core Specification 2.0, 5.4.7 and 5.4.8)
const I32_NE = 0x47, I32_EQ = 0x46, I32_GE_U = 0x4f, I32_DIV_U = 0x6e, I32_SHL = 0x74, I32_SHR_U = 0x76, I32_LOAD = 0x28;
// control (5.4.1)
const IF = 0x04, ELSE = 0x05, BLOCK_TYPE_EMPTY = 0x40, END_OP = 0x0b;
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
  return kernelModule([{ exportName: "steps", params: 5, locals: [[11, I32], [11, V128]], body }, firstStep()]);
}

// the first step's locals: its parameters, then 6 i32 and 9 v128 locals
const F_OUT = 0, F_COUNT = 1, F_SIZEB = 2, F_SRC = 3, F_GSB = 4, F_SSB = 5, F_BITREV = 6, F_BLOCKS = 7, F_LENB = 8, F_HALFB = 9, F_MODE = 10;
const F_T = 11, F_BR = 12, F_OB = 13, F_G = 14, F_IA = 15, F_O = 16;
const F_A = 17, F_B = 18, F_C = 19, F_D = 20, F_T0 = 21, F_T1 = 22, F_T2 = 23, F_S3 = 24, F_TMP = 25;
/** MODE values: radix-2 butterflies (length-4 blocks), copies (three zero inputs per butterfly), radix-4 butterflies. */
export const FIRST_RADIX2 = 0, FIRST_COPY = 1, FIRST_RADIX4 = 2;

/**
 * "first"(out, count, sizeBytes, src, gsB, ssB, bitrev, blocks, lenB, halfB,
 * mode): fft.js's first step (fft.ts firstSteps, its twin) for `count`
 * inputs in this memory (input g's element j at src + g·gsB + j·ssB bytes)
 * into the buffers at out (output g at out + g·sizeBytes): per block t of
 * lenB bytes the inputs from element bitrev[t]/2 (i32 at bitrev + 4t) on, halfB
 * bytes apart; the butterflies of `mode` with the twin's additions
 * ((T1r + T3i, T1i − T3r) = T1 + swap(T3)·(1, −1), as in the later steps).
 */
function firstStep(): KernelSource {
  const swapF: Code = [...localTee(F_TMP), ...localGet(F_TMP), ...simd(I8X16_SHUFFLE), 8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
  const at = (k: number): Code => [...localGet(F_IA), ...(k === 0 ? [] : [...localGet(F_HALFB), ...i32Const(k), I32_MUL, I32_ADD]), ...v128Load(0)];
  const store = (k: number, value: Code): Code => [...localGet(F_O), ...value, ...v128Store(16 * k)];
  const radix2: Code = [
    ...at(0), ...localSet(F_A), ...at(1), ...localSet(F_B),
    ...store(0, [...localGet(F_A), ...localGet(F_B), ...ADD]),
    ...store(1, [...localGet(F_A), ...localGet(F_B), ...SUB]),
  ];
  const copy: Code = [...at(0), ...localSet(F_A), ...[0, 1, 2, 3].flatMap((k) => store(k, localGet(F_A)))];
  const radix4: Code = [
    ...at(0), ...localSet(F_A), ...at(1), ...localSet(F_B), ...at(2), ...localSet(F_C), ...at(3), ...localSet(F_D),
    ...localGet(F_A), ...localGet(F_C), ...ADD, ...localSet(F_T0),
    ...localGet(F_A), ...localGet(F_C), ...SUB, ...localSet(F_T1),
    ...localGet(F_B), ...localGet(F_D), ...ADD, ...localSet(F_T2),
    // S3 = swap(B − D)·(1, −1)
    ...localGet(F_B), ...localGet(F_D), ...SUB, ...swapF, ...v128Const(SIGN_BYTES), ...MUL, ...localSet(F_S3),
    ...store(0, [...localGet(F_T0), ...localGet(F_T2), ...ADD]),
    ...store(1, [...localGet(F_T1), ...localGet(F_S3), ...ADD]),
    ...store(2, [...localGet(F_T0), ...localGet(F_T2), ...SUB]),
    ...store(3, [...localGet(F_T1), ...localGet(F_S3), ...SUB]),
  ];
  const perInput = (butterfly: Code): Code => [
    ...i32Const(0), ...localSet(F_G),
    ...localGet(F_OB), ...localSet(F_O),
    ...loop(
      butterfly,
      [...localGet(F_IA), ...localGet(F_GSB), I32_ADD, ...localSet(F_IA)],
      [...localGet(F_O), ...localGet(F_SIZEB), I32_ADD, ...localSet(F_O)],
      [...localGet(F_G), ...i32Const(1), I32_ADD, ...localTee(F_G), ...localGet(F_COUNT), I32_LT_U, BR_IF, 0],
    ),
  ];
  const body: Code = [
    ...i32Const(0), ...localSet(F_T),
    ...localGet(F_BITREV), ...localSet(F_BR),
    ...localGet(F_OUT), ...localSet(F_OB),
    ...loop(
      // iA = src + (bitrev[t] >> 1)·ssB
      [...localGet(F_SRC), ...localGet(F_BR), I32_LOAD, 2, 0, ...i32Const(1), I32_SHR_U, ...localGet(F_SSB), I32_MUL, I32_ADD, ...localSet(F_IA)],
      [...localGet(F_MODE), ...i32Const(FIRST_RADIX4), I32_EQ, IF, BLOCK_TYPE_EMPTY, ...perInput(radix4), ELSE,
        ...localGet(F_MODE), ...i32Const(FIRST_COPY), I32_EQ, IF, BLOCK_TYPE_EMPTY, ...perInput(copy), ELSE, ...perInput(radix2), END_OP, END_OP],
      [...localGet(F_BR), ...i32Const(4), I32_ADD, ...localSet(F_BR)],
      [...localGet(F_OB), ...localGet(F_LENB), I32_ADD, ...localSet(F_OB)],
      [...localGet(F_T), ...i32Const(1), I32_ADD, ...localTee(F_T), ...localGet(F_BLOCKS), I32_LT_U, BR_IF, 0],
    ),
  ];
  return { exportName: "first", params: 11, locals: [[6, I32], [9, V128]], body };
}

function v128Const(bytes: number[]): Code {
  return [...simd(V128_CONST), ...bytes];
}

type StepsFn = (out: number, count: number, sizeBytes: number, step0: number, tw: number) => void;
type FirstFn = (out: number, count: number, sizeBytes: number, src: number, gsB: number, ssB: number, bitrev: number, blocks: number, lenB: number, halfB: number, mode: number) => void;

const newKernel = kernelFactory<StepsFn>(fftStepsModule, "steps");

/** The steps kernel of one plan: its own memory holding the twiddles and the first step's bit-reversal offsets, then `buffers` buffers of 2n doubles. */
export interface FftSteps {
  kernel: Kernel<StepsFn>;
  /** The first step (see firstStep) on inputs in this memory. */
  first: FirstFn;
  /** Byte offset of the bit-reversal offsets (i32) and of the first buffer. */
  bitrevBytes: number;
  bufBytes: number;
}

/** A steps kernel for n-point transforms with fft.js's `table` (2n doubles) and first-step offsets `bitrev`, room for `buffers` buffers; null where WebAssembly SIMD is unavailable. */
export function fftSteps(table: Float64Array, n: number, buffers: number, bitrev: Int32Array = new Int32Array(0)): FftSteps | null {
  const kernel = newKernel();
  if (!kernel) return null;
  const bitrevBytes = 32 * n, bufBytes = bitrevBytes + 16 * Math.ceil((4 * bitrev.length) / 16);
  const f64 = reserveKernelMemory(kernel, bufBytes + buffers * 16 * n);
  for (let j = 0; j < n; j++) {
    const tr = table[2 * j]!, ti = table[2 * j + 1]!;
    f64[4 * j] = tr;
    f64[4 * j + 1] = tr;
    f64[4 * j + 2] = -ti;
    f64[4 * j + 3] = ti;
  }
  new Int32Array(kernel.memory.buffer, bitrevBytes, bitrev.length).set(bitrev);
  return { kernel, first: kernel.exports["first"] as FirstFn, bitrevBytes, bufBytes };
}
