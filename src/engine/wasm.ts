/**
 * The readout recurrence as a WebAssembly SIMD kernel, assembled here byte by
 * byte (no toolchain): f64x2 lanes hold two consecutive samples of one group,
 * (z·a^j, z·a^(j+1)), stepped by a² — so samples accumulate lane-wise with no
 * horizontal add — two groups at a time, summed before they are added to the
 * output. Plain IEEE double mul/add/sub (no fused multiply-add), so the bits
 * are the same on every machine. The TypeScript readoutRecurrence stays the
 * fallback and the oracle (the two agree to rounding, not bitwise: this one
 * steps by a²).
 *
 * Memory layout (bytes from 0): S = sample pairs, 32 bytes per pair
 * [re_j, re_j+1, im_j, im_j+1]; then G = 48 bytes per group
 * [Re z, Re z·a, Im z, Im z·a, Re a², Im a²].
 */
import { readoutRecurrence } from "./kernels.js";

function leb(n: number): number[] {
  const out: number[] = [];
  do {
    let b = n & 0x7f;
    n >>>= 7;
    if (n !== 0) b |= 0x80;
    out.push(b);
  } while (n !== 0);
  return out;
}

/** The module's bytes (see the layout above): export "readout"(sOff, pairs, gOff, groups even ≥ 2, pairs ≥ 1), export "memory". */
function readoutModule(): Uint8Array<ArrayBuffer> {
  const get = (i: number) => [0x20, i], set = (i: number) => [0x21, i], tee = (i: number) => [0x22, i];
  const i32 = (v: number) => [0x41, v]; // small non-negative constants < 64 only
  const v128load = (off: number) => [0xfd, 0x00, 4, ...leb(off)];
  const v128store = (off: number) => [0xfd, 0x0b, 4, ...leb(off)];
  const f64load = (off: number) => [0x2b, 3, ...leb(off)];
  const splat = [0xfd, 0x14], add = [0xfd, 0xf0, 0x01], sub = [0xfd, 0xf1, 0x01], mul = [0xfd, 0xf2, 0x01];
  // params 0 sOff, 1 pairs, 2 gOff, 3 groups; i32 locals 4 g, 5 j, 6 p, 7 q; v128 locals 8 z0r, 9 z0i, 10 z1r, 11 z1i, 12 a0r, 13 a0i, 14 a1r, 15 a1i, 16 t
  const cmul = (zr: number, zi: number, ar: number, ai: number) => [
    ...get(zr), ...get(ar), ...mul, ...get(zi), ...get(ai), ...mul, ...sub, ...set(16),
    ...get(zr), ...get(ai), ...mul, ...get(zi), ...get(ar), ...mul, ...add, ...set(zi),
    ...get(16), ...set(zr),
  ];
  const body = [
    2, 4, 0x7f, 9, 0x7b, // locals: 4 × i32, 9 × v128
    ...i32(0), ...set(4),
    0x03, 0x40, // loop over group pairs
    ...get(2), ...get(4), ...i32(48), 0x6c, 0x6a, ...set(7),
    ...get(7), ...v128load(0), ...set(8),
    ...get(7), ...v128load(16), ...set(9),
    ...get(7), ...f64load(32), ...splat, ...set(12),
    ...get(7), ...f64load(40), ...splat, ...set(13),
    ...get(7), ...v128load(48), ...set(10),
    ...get(7), ...v128load(64), ...set(11),
    ...get(7), ...f64load(80), ...splat, ...set(14),
    ...get(7), ...f64load(88), ...splat, ...set(15),
    ...get(0), ...set(6),
    ...get(1), ...set(5),
    0x03, 0x40, // loop over sample pairs
    ...get(6), ...get(6), ...v128load(0), ...get(8), ...get(10), ...add, ...add, ...v128store(0),
    ...get(6), ...get(6), ...v128load(16), ...get(9), ...get(11), ...add, ...add, ...v128store(16),
    ...cmul(8, 9, 12, 13),
    ...cmul(10, 11, 14, 15),
    ...get(6), ...i32(32), 0x6a, ...set(6),
    ...get(5), ...i32(1), 0x6b, ...tee(5), 0x0d, 0, // br_if inner loop
    0x0b,
    ...get(4), ...i32(2), 0x6a, ...tee(4), ...get(3), 0x49, 0x0d, 0, // br_if g < groups
    0x0b,
    0x0b,
  ];
  const section = (id: number, content: number[]) => [id, ...leb(content.length), ...content];
  const name = (s: string) => [...leb(s.length), ...[...s].map((c) => c.charCodeAt(0))];
  const bytes = [
    0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00,
    ...section(1, [1, 0x60, 4, 0x7f, 0x7f, 0x7f, 0x7f, 0]),
    ...section(3, [1, 0]),
    ...section(5, [1, 0x00, 1]),
    ...section(7, [2, ...name("readout"), 0x00, 0, ...name("memory"), 0x02, 0]),
    ...section(10, [1, ...leb(body.length), ...body]),
  ];
  return new Uint8Array(bytes);
}

interface Kernel {
  readout: (sOff: number, pairs: number, gOff: number, groups: number) => void;
  memory: WebAssembly.Memory;
  f64: Float64Array;
}

let kernel: Kernel | null | undefined;

/** The SIMD kernel of this thread, or null where WebAssembly SIMD is unavailable (or ISOFOLD_NO_WASM is set). */
export function wasmKernel(): Kernel | null {
  if (kernel !== undefined) return kernel;
  kernel = null;
  if (process.env["ISOFOLD_NO_WASM"]) return kernel;
  try {
    const inst = new WebAssembly.Instance(new WebAssembly.Module(readoutModule()), {});
    const e = inst.exports as unknown as { readout: Kernel["readout"]; memory: WebAssembly.Memory };
    kernel = { readout: e.readout, memory: e.memory, f64: new Float64Array(e.memory.buffer) };
  } catch {
    kernel = null;
  }
  return kernel;
}

/**
 * Same contract as {@link readoutRecurrence} — for each group g,
 * s[j] += z_g·a_g^j, j = 0 … n−1 — on the SIMD kernel when available
 * (lanes step by a_g², so rounding differs from the scalar recurrence at the
 * 1e-16 level per step); otherwise the scalar kernel.
 */
export function readoutRecurrenceFast(
  sr: Float64Array, si: Float64Array, n: number,
  zr: Float64Array, zi: Float64Array, ar: Float64Array, ai: Float64Array, groups: number,
): void {
  const k = groups > 0 && n > 1 ? wasmKernel() : null;
  if (k === null) {
    readoutRecurrence(sr, si, n, zr, zi, ar, ai, groups);
    return;
  }
  const pairs = (n + 1) >> 1, gEven = groups + (groups & 1);
  const sWords = 4 * pairs, need = (sWords + 6 * gEven) * 8;
  if (k.memory.buffer.byteLength < need) {
    k.memory.grow(Math.ceil((need - k.memory.buffer.byteLength) / 65536));
    k.f64 = new Float64Array(k.memory.buffer);
  }
  const m = k.f64;
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
  k.readout(0, pairs, sWords * 8, gEven);
  for (let j = 0, q = 0; j < n; j += 2, q += 4) {
    sr[j] = sr[j]! + m[q]!;
    si[j] = si[j]! + m[q + 2]!;
    if (j + 1 < n) {
      sr[j + 1] = sr[j + 1]! + m[q + 1]!;
      si[j + 1] = si[j + 1]! + m[q + 3]!;
    }
  }
}

/** Name of the readout kernel this thread uses; part of a result's definition (recorded for shards). */
export function readoutKernelName(): string {
  return wasmKernel() ? "wasm-simd-f64x2" : "scalar";
}
