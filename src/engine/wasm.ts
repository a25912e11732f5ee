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
import { readoutRecurrence, rfAffine } from "./kernels.js";

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

/** The SIMD kernel of this thread, or null where WebAssembly SIMD is unavailable or `enabled` is false (the engine's `wasm` option). */
export function wasmKernel(enabled = true): Kernel | null {
  if (!enabled) return null;
  if (kernel !== undefined) return kernel;
  kernel = null;
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
  zr: Float64Array, zi: Float64Array, ar: Float64Array, ai: Float64Array, groups: number, useWasm = true,
): void {
  const k = groups > 0 && n > 1 ? wasmKernel(useWasm) : null;
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

function rfModule(): Uint8Array<ArrayBuffer> {
  type E = number[];
  const SIMD = (op: number): E => [0xfd, ...leb(op)];
  const get = (i: number): E => [0x20, ...leb(i)], set = (i: number, e: E): E => [...e, 0x21, ...leb(i)];
  const mul = (a: E, b: E): E => [...a, ...b, ...SIMD(0xf2)], add = (a: E, b: E): E => [...a, ...b, ...SIMD(0xf0)];
  const sub = (a: E, b: E): E => [...a, ...b, ...SIMD(0xf1)], div = (a: E, b: E): E => [...a, ...b, ...SIMD(0xf3)];
  const max = (a: E, b: E): E => [...a, ...b, ...SIMD(0xf5)], sqrt = (a: E): E => [...a, ...SIMD(0xef)];
  const load = (addr: E, off: number): E => [...addr, 0xfd, 0x00, 4, ...leb(off)];
  const splat = (addr: E, off: number): E => [...addr, 0x2b, 3, ...leb(off), ...SIMD(0x14)];
  // params: 0 pW, 1 n, 2 pP; i32 locals 3 p, 4 j; v128 locals from 5
  let next = 5;
  const v = () => next++;
  const wz = v(), wz2 = v(), E2 = v(), E1 = v(), REC = v(), dt = v(), one = v(), tiny = v();
  const st = Array.from({ length: 12 }, v);
  const sc = Array.from({ length: 9 }, v), cc = Array.from({ length: 9 }, v);
  const [wx, wy, w, inv, th, t2, sn, c, C, nx, ny, nz, xC, yC, zC, xs, ys, zs] = Array.from({ length: 18 }, v);
  const r = Array.from({ length: 9 }, v);
  const t = Array.from({ length: 3 }, v);
  const nV = next - 5;
  const P = get(2);
  const body: E = [];
  const emit = (...es: E[]) => { for (const e of es) body.push(...e); };
  // constants and state
  [wz, wz2, E2, E1, REC, dt, one, tiny].forEach((l, k) => emit(set(l, load(P, 16 * k))));
  st.forEach((l, k) => emit(set(l, load(P, 16 * (8 + k)))));
  sc.forEach((l, k) => emit(set(l, load(P, 16 * (20 + k)))));
  cc.forEach((l, k) => emit(set(l, load(P, 16 * (29 + k)))));
  emit(set(3, get(0)), set(4, get(1)));
  emit([0x03, 0x40]); // loop
  // relax over dt
  for (let k = 0; k < 6; k++) emit(set(st[k]!, mul(get(st[k]!), get(E2))));
  for (let k = 6; k < 9; k++) emit(set(st[k]!, mul(get(st[k]!), get(E1))));
  emit(set(st[9]!, mul(get(st[9]!), get(E2))), set(st[10]!, mul(get(st[10]!), get(E2))));
  emit(set(st[11]!, add(mul(get(st[11]!), get(E1)), get(REC))));
  // axis and angle
  emit(set(wx, splat(get(3), 0)), set(wy, splat(get(3), 8)));
  emit(set(w, sqrt(max(add(add(mul(get(wx), get(wx)), mul(get(wy), get(wy))), get(wz2)), get(tiny)))));
  emit(set(inv, div(get(one), get(w))), set(th, mul(get(w), get(dt))), set(t2, mul(get(th), get(th))));
  // sin θ = θ(1 + t2(s3 + t2(s5 + …))), cos θ = 1 + t2(c2 + t2(c4 + …))
  let hs: E = get(sc[8]!), hc: E = get(cc[8]!);
  for (let k = 7; k >= 0; k--) {
    hs = add(get(sc[k]!), mul(get(t2), hs));
    hc = add(get(cc[k]!), mul(get(t2), hc));
  }
  emit(set(sn, mul(get(th), add(get(one), mul(get(t2), hs)))));
  emit(set(c, add(get(one), mul(get(t2), hc))));
  emit(set(C, sub(get(one), get(c))));
  emit(set(nx, mul(get(wx), get(inv))), set(ny, mul(get(wy), get(inv))), set(nz, mul(get(wz), get(inv))));
  emit(set(xC, mul(get(nx), get(C))), set(yC, mul(get(ny), get(C))), set(zC, mul(get(nz), get(C))));
  emit(set(xs, mul(get(nx), get(sn))), set(ys, mul(get(ny), get(sn))), set(zs, mul(get(nz), get(sn))));
  emit(
    set(r[0]!, add(get(c), mul(get(nx), get(xC)))), set(r[1]!, sub(mul(get(nx), get(yC)), get(zs))), set(r[2]!, add(mul(get(nx), get(zC)), get(ys))),
    set(r[3]!, add(mul(get(ny), get(xC)), get(zs))), set(r[4]!, add(get(c), mul(get(ny), get(yC)))), set(r[5]!, sub(mul(get(ny), get(zC)), get(xs))),
    set(r[6]!, sub(mul(get(nz), get(xC)), get(ys))), set(r[7]!, add(mul(get(nz), get(yC)), get(xs))), set(r[8]!, add(get(c), mul(get(nz), get(zC)))),
  );
  // columns of [A | b]: (a0k, a1k, a2k) for k = 0, 1, 2 and (b0, b1, b2)
  const cols = [[st[0]!, st[3]!, st[6]!], [st[1]!, st[4]!, st[7]!], [st[2]!, st[5]!, st[8]!], [st[9]!, st[10]!, st[11]!]];
  for (const col of cols) {
    for (let row = 0; row < 3; row++) {
      emit(set(t[row]!, add(add(mul(get(r[3 * row]!), get(col[0]!)), mul(get(r[3 * row + 1]!), get(col[1]!))), mul(get(r[3 * row + 2]!), get(col[2]!)))));
    }
    for (let row = 0; row < 3; row++) emit(set(col[row]!, get(t[row]!)));
  }
  emit([0x20, 3, 0x41, 16, 0x6a, 0x21, 3]); // p += 16
  emit([0x20, 4, 0x41, 1, 0x6b, 0x22, 4, 0x0d, 0]); // j -= 1; br_if j ≠ 0
  emit([0x0b]);
  st.forEach((l, k) => emit([...P, ...get(l), 0xfd, 0x0b, 4, ...leb(16 * (8 + k))]));
  emit([0x0b]);
  const fn = [2, 2, 0x7f, ...leb(nV), 0x7b, ...body];
  const section = (id: number, content: number[]) => [id, ...leb(content.length), ...content];
  const name = (s: string) => [...leb(s.length), ...[...s].map((ch) => ch.charCodeAt(0))];
  return new Uint8Array([
    0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00,
    ...section(1, [1, 0x60, 3, 0x7f, 0x7f, 0x7f, 0]),
    ...section(3, [1, 0]),
    ...section(5, [1, 0x00, 1]),
    ...section(7, [2, ...name("rf"), 0x00, 0, ...name("memory"), 0x02, 0]),
    ...section(10, [1, ...leb(fn.length), ...fn]),
  ]);
}

interface RfKernel {
  rf: (pW: number, n: number, pP: number) => void;
  memory: WebAssembly.Memory;
  f64: Float64Array;
}
let rfKernel: RfKernel | null | undefined;

/** The SIMD RF kernel of this thread, or null (no WebAssembly SIMD, or `enabled` false). */
export function wasmRfKernel(enabled = true): RfKernel | null {
  if (!enabled) return null;
  if (rfKernel !== undefined) return rfKernel;
  rfKernel = null;
  try {
    const inst = new WebAssembly.Instance(new WebAssembly.Module(rfModule()), {});
    const e = inst.exports as unknown as { rf: RfKernel["rf"]; memory: WebAssembly.Memory };
    rfKernel = { rf: e.rf, memory: e.memory, f64: new Float64Array(e.memory.buffer) };
  } catch {
    rfKernel = null;
  }
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
  if (k === null || n === 0) {
    for (let c = 0; c < count; c++) rfAffine(out, o0 + 12 * c, b1re, b1im, dt, gamma, f[c]!, r1[c]!, r2[c]!);
    return;
  }
  const P = 2 * n; // pair block after the steps, in f64 words
  const need = (P + 2 * 38) * 8;
  if (k.memory.buffer.byteLength < need) {
    k.memory.grow(Math.ceil((need - k.memory.buffer.byteLength) / 65536));
    k.f64 = new Float64Array(k.memory.buffer);
  }
  const m = k.f64;
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
    k.rf(0, n, P * 8);
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
