/**
 * A small WebAssembly assembler for the engine's hand-written kernels: named
 * opcodes, LEB128 integers, a one-function module builder and one shared
 * instantiate helper. Encodings follow the WebAssembly Core Specification,
 * Release 2.0 (W3C Recommendation, 2022), chapter 5 "Binary Format", whose
 * vector instructions are the fixed-width SIMD extension (prefix 0xFD).
 * No toolchain: a kernel is a list of bytes built from these names.
 */

/** Bytes of an expression or instruction sequence. */
export type Code = number[];

// --- value types (spec 5.3.1, 5.3.3)
export const I32 = 0x7f;
export const F64 = 0x7c;
export const V128 = 0x7b;
export const FUNC_TYPE = 0x60;

// --- control (spec 5.4.1)
export const BLOCK_TYPE_EMPTY = 0x40;
export const LOOP = 0x03;
export const BR_IF = 0x0d;
export const END = 0x0b;

// --- variables (5.4.3), memory (5.4.6), numeric (5.4.7)
export const LOCAL_GET = 0x20;
export const LOCAL_SET = 0x21;
export const LOCAL_TEE = 0x22;
export const F64_LOAD = 0x2b;
export const I32_CONST = 0x41;
export const I32_LT_U = 0x49;
export const I32_ADD = 0x6a;
export const I32_SUB = 0x6b;
export const I32_MUL = 0x6c;

// --- vector instructions (5.4.8): prefix 0xFD, then the sub-opcode as an unsigned LEB128
export const SIMD_PREFIX = 0xfd;
export const V128_LOAD = 0x00;
export const V128_STORE = 0x0b;
export const F64X2_SPLAT = 0x14;
export const F64X2_SQRT = 0xef;
export const F64X2_ADD = 0xf0;
export const F64X2_SUB = 0xf1;
export const F64X2_MUL = 0xf2;
export const F64X2_DIV = 0xf3;
export const F64X2_MAX = 0xf5;

/** log2 of the natural alignment of a 16-byte vector and of an f64 (memarg alignment field). */
const ALIGN_V128 = 4, ALIGN_F64 = 3;

/** Unsigned LEB128 of a non-negative integer below 2^32 (spec 5.2.2). */
export function uleb(n: number): Code {
  if (!Number.isInteger(n) || n < 0 || n > 0xffffffff) throw new RangeError(`uleb: ${n} is not a u32`);
  const out: Code = [];
  do {
    let b = n % 128;
    n = Math.floor(n / 128);
    if (n !== 0) b |= 0x80;
    out.push(b);
  } while (n !== 0);
  return out;
}

/** Signed LEB128 of an integer in the i32 range (spec 5.2.2). */
export function sleb(n: number): Code {
  if (!Number.isInteger(n) || n < -0x80000000 || n > 0x7fffffff) throw new RangeError(`sleb: ${n} is not an i32`);
  const out: Code = [];
  for (;;) {
    const b = n & 0x7f;
    n >>= 7;
    const done = (n === 0 && (b & 0x40) === 0) || (n === -1 && (b & 0x40) !== 0);
    out.push(done ? b : b | 0x80);
    if (done) return out;
  }
}

// --- instructions
export const localGet = (i: number): Code => [LOCAL_GET, ...uleb(i)];
export const localSet = (i: number): Code => [LOCAL_SET, ...uleb(i)];
export const localTee = (i: number): Code => [LOCAL_TEE, ...uleb(i)];
export const i32Const = (v: number): Code => [I32_CONST, ...sleb(v)];
/** A vector instruction without immediates. */
export const simd = (sub: number): Code => [SIMD_PREFIX, ...uleb(sub)];
/** v128.load at (address on the stack) + offset bytes. */
export const v128Load = (offset: number): Code => [...simd(V128_LOAD), ALIGN_V128, ...uleb(offset)];
/** v128.store of (address, value) on the stack at address + offset bytes. */
export const v128Store = (offset: number): Code => [...simd(V128_STORE), ALIGN_V128, ...uleb(offset)];
/** f64.load at (address on the stack) + offset bytes. */
export const f64Load = (offset: number): Code => [F64_LOAD, ALIGN_F64, ...uleb(offset)];
/** `loop` with no result; the body; `end`. A `br_if 0` inside jumps back to the top. */
export const loop = (...body: Code[]): Code => [LOOP, BLOCK_TYPE_EMPTY, ...body.flat(), END];

/** A name (spec 5.2.4) of ASCII characters. */
function name(s: string): Code {
  return [...uleb(s.length), ...[...s].map((c) => c.charCodeAt(0))];
}

function section(id: number, content: Code): Code {
  return [id, ...uleb(content.length), ...content];
}

/** Section ids (spec 5.5.2). */
const SECTION_TYPE = 1, SECTION_FUNCTION = 3, SECTION_MEMORY = 5, SECTION_EXPORT = 7, SECTION_CODE = 10;
const EXPORT_FUNC = 0x00, EXPORT_MEMORY = 0x02, LIMITS_MIN_ONLY = 0x00;

/** One function with its own memory: what every engine kernel is. */
export interface KernelSource {
  /** Name of the exported function. */
  exportName: string;
  /** Parameters, all i32 (the function returns nothing). */
  params: number;
  /** Local declarations after the parameters, as runs of [count, value type]. */
  locals: [number, number][];
  /** The instructions, without the function's final `end`. */
  body: Code;
}

/**
 * The bytes of a module with one function (type () of `params` i32 → ()), or
 * several (each its own type), one memory of one page at the start, exported
 * as "memory", and each function exported under its name.
 */
export function kernelModule(k: KernelSource | KernelSource[]): Uint8Array<ArrayBuffer> {
  const fns = Array.isArray(k) ? k : [k];
  const types = fns.flatMap((f) => [FUNC_TYPE, ...uleb(f.params), ...new Array<number>(f.params).fill(I32), 0]);
  const bodies = fns.flatMap((f) => {
    const locals = [...uleb(f.locals.length), ...f.locals.flatMap(([count, type]) => [...uleb(count), type])];
    const fn = [...locals, ...f.body, END];
    return [...uleb(fn.length), ...fn];
  });
  const exports = fns.flatMap((f, i) => [...name(f.exportName), EXPORT_FUNC, ...uleb(i)]);
  return new Uint8Array([
    0x00, 0x61, 0x73, 0x6d, // magic "\0asm"
    0x01, 0x00, 0x00, 0x00, // version 1
    ...section(SECTION_TYPE, [...uleb(fns.length), ...types]),
    ...section(SECTION_FUNCTION, [...uleb(fns.length), ...fns.map((_, i) => uleb(i)).flat()]),
    ...section(SECTION_MEMORY, [1, LIMITS_MIN_ONLY, 1]),
    ...section(SECTION_EXPORT, [...uleb(fns.length + 1), ...exports, ...name("memory"), EXPORT_MEMORY, 0]),
    ...section(SECTION_CODE, [...uleb(fns.length), ...bodies]),
  ]);
}

/** An instantiated kernel: its function, its memory and a Float64Array view of that memory. */
export interface Kernel<F> {
  run: F;
  memory: WebAssembly.Memory;
  f64: Float64Array;
  /** Every export of the instance (a module with several functions). */
  exports: Record<string, unknown>;
}

/**
 * Instantiates a kernel module, from its bytes or compiled once
 * (synchronously: the modules are a few hundred bytes), and returns its function under `exportName`, or null where
 * WebAssembly or its SIMD extension is unavailable.
 */
export function instantiateKernel<F>(bytes: Uint8Array<ArrayBuffer> | WebAssembly.Module, exportName: string): Kernel<F> | null {
  try {
    if (typeof WebAssembly !== "object") return null;
    if (!(bytes instanceof WebAssembly.Module) && !WebAssembly.validate(bytes)) return null;
    const e = new WebAssembly.Instance(bytes instanceof WebAssembly.Module ? bytes : new WebAssembly.Module(bytes), {}).exports as Record<string, unknown>;
    const memory = e.memory as WebAssembly.Memory;
    return { run: e[exportName] as F, memory, f64: new Float64Array(memory.buffer), exports: e };
  } catch {
    return null;
  }
}

/**
 * A kernel made on demand: its module compiled once, on first use, from
 * `bytes()`; each call returns a fresh instance (a memory of its own), or
 * null where WebAssembly or its SIMD extension is unavailable.
 */
export function kernelFactory<F>(bytes: () => Uint8Array<ArrayBuffer>, exportName: string): () => Kernel<F> | null {
  let compiled: WebAssembly.Module | null | undefined;
  return () => {
    if (compiled === undefined) {
      try {
        const b = bytes();
        compiled = typeof WebAssembly === "object" && WebAssembly.validate(b) ? new WebAssembly.Module(b) : null;
      } catch {
        compiled = null;
      }
    }
    return compiled ? instantiateKernel<F>(compiled, exportName) : null;
  };
}

/** Grows a kernel's memory to at least `bytes` (whole 64 KiB pages) and refreshes its view. */
export function reserveKernelMemory<F>(k: Kernel<F>, bytes: number): Float64Array {
  const have = k.memory.buffer.byteLength;
  if (have < bytes) {
    k.memory.grow(Math.ceil((bytes - have) / 65536));
    k.f64 = new Float64Array(k.memory.buffer);
  }
  return k.f64;
}

/**
 * A per-thread on/off switch for one kernel (tests compare a kernel with its
 * TypeScript twin): `on()` reads it, `set(on)` sets it and returns the
 * previous setting.
 */
export function kernelSwitch(): { on: () => boolean; set: (on: boolean) => boolean } {
  let enabled = true;
  return {
    on: () => enabled,
    set: (on) => {
      const was = enabled;
      enabled = on;
      return was;
    },
  };
}
