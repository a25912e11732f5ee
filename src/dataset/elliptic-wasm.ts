/**
 * The complete elliptic integrals K(m) and E(m) of coils.ts ellipticKEMany
 * (the arithmetic–geometric mean) as a WebAssembly SIMD kernel: two points
 * per f64x2, each lane with the same operations in the same order as the
 * TypeScript (the same bits), a lane whose iteration has converged left as it
 * is while the other goes on (v128.bitselect). The Biot–Savart field of the
 * loop coils spends most of its time here (dataset/coils.ts loopFieldMany).
 *
 * Memory (bytes): m from 0, K from 8·cap, E from 16·cap (cap = MAX_POINTS).
 */
import {
  BR_IF, END, F64X2_ADD, F64X2_DIV, F64X2_MUL, F64X2_SQRT, F64X2_SUB, I32, I32_ADD, I32_LT_U, I32_MUL, LOOP, V128,
  i32Const, kernelFactory, kernelModule, kernelSwitch, localGet, localSet, localTee, reserveKernelMemory, simd, v128Load, v128Store,
  type Code, type Kernel,
} from "../engine/wasm-asm.js";

/** Points per call at most (loopFieldMany's batch). */
export const MAX_POINTS = 64;

// opcodes this kernel uses beyond wasm-asm.ts's (WebAssembly Core Specification 2.0, 5.4.1 and 5.4.8)
const BLOCK = 0x02, I32_EQZ = 0x45;
const V128_CONST = 0x0c, F64X2_GT = 0x4a, V128_BITSELECT = 0x52, V128_ANY_TRUE = 0x53;

/** v128.const of two equal doubles. */
function pair(x: number): Code {
  const b = new Uint8Array(new Float64Array([x, x]).buffer);
  return [...simd(V128_CONST), ...b];
}

// locals: parameters (m, K, E byte offsets, pairs), then i32 and v128 locals
const P_M = 0, P_K = 1, P_E = 2, P_N = 3;
const L_I = 4, L_IT = 5, L_OFF = 6;
const L_A = 7, L_B = 8, L_C = 9, L_SUM = 10, L_POW = 11, L_MASK = 12, L_AN = 13, L_C1 = 14, L_M = 15;

/** The module's bytes: export "ke"(m, K, E, pairs) (pairs ≥ 1); export "memory". */
export function ellipticModule(): Uint8Array<ArrayBuffer> {
  const v = (op: number): Code => simd(op);
  // a ← bitselect(new, a, mask): the lanes still iterating take the new value
  const keep = (local: number, fresh: Code): Code => [...fresh, ...localGet(local), ...localGet(L_MASK), ...v(V128_BITSELECT), ...localSet(local)];
  const iteration: Code = [
    // mask = c > 1e-17·a (a NaN compares false: left alone, as `!(c > 1e-17 * a)` skips it)
    ...localGet(L_C), ...pair(1e-17), ...localGet(L_A), ...v(F64X2_MUL), ...v(F64X2_GT), ...localTee(L_MASK),
    ...v(V128_ANY_TRUE), I32_EQZ, BR_IF, 1,
    // an = 0.5·(a + b); c1 = (c·c)/(4·an)
    ...pair(0.5), ...localGet(L_A), ...localGet(L_B), ...v(F64X2_ADD), ...v(F64X2_MUL), ...localSet(L_AN),
    ...localGet(L_C), ...localGet(L_C), ...v(F64X2_MUL), ...pair(4), ...localGet(L_AN), ...v(F64X2_MUL), ...v(F64X2_DIV), ...localSet(L_C1),
    // sum = sum + pow·c1·c1 (before a changes: it reads neither)
    ...keep(L_SUM, [...localGet(L_SUM), ...localGet(L_POW), ...localGet(L_C1), ...v(F64X2_MUL), ...localGet(L_C1), ...v(F64X2_MUL), ...v(F64X2_ADD)]),
    ...keep(L_C, localGet(L_C1)),
    // b = sqrt(a·b) with the old a; then a = an
    ...keep(L_B, [...localGet(L_A), ...localGet(L_B), ...v(F64X2_MUL), ...v(F64X2_SQRT)]),
    ...keep(L_A, localGet(L_AN)),
    ...localGet(L_POW), ...localGet(L_POW), ...v(F64X2_ADD), ...localSet(L_POW),
    ...localGet(L_IT), ...i32Const(1), I32_ADD, ...localTee(L_IT), ...i32Const(64), I32_LT_U, BR_IF, 0,
  ];
  const body: Code = [
    ...i32Const(0), ...localSet(L_I),
    LOOP, 0x40,
    // off = 16·i; m = the pair at P_M + off
    ...localGet(L_I), ...i32Const(16), I32_MUL, ...localSet(L_OFF),
    ...localGet(P_M), ...localGet(L_OFF), I32_ADD, ...v128Load(0), ...localSet(L_M),
    ...pair(1), ...localSet(L_A),
    ...pair(1), ...localGet(L_M), ...v(F64X2_SUB), ...v(F64X2_SQRT), ...localSet(L_B),
    ...localGet(L_M), ...v(F64X2_SQRT), ...localSet(L_C),
    ...pair(0.5), ...localGet(L_M), ...v(F64X2_MUL), ...localSet(L_SUM),
    ...pair(1), ...localSet(L_POW),
    ...i32Const(0), ...localSet(L_IT),
    BLOCK, 0x40, LOOP, 0x40, ...iteration, END, END,
    // K = π/(2·a); E = K·(1 − sum)
    ...localGet(P_K), ...localGet(L_OFF), I32_ADD,
    ...pair(Math.PI), ...pair(2), ...localGet(L_A), ...v(F64X2_MUL), ...v(F64X2_DIV), ...localTee(L_AN), ...v128Store(0),
    ...localGet(P_E), ...localGet(L_OFF), I32_ADD,
    ...localGet(L_AN), ...pair(1), ...localGet(L_SUM), ...v(F64X2_SUB), ...v(F64X2_MUL), ...v128Store(0),
    ...localGet(L_I), ...i32Const(1), I32_ADD, ...localTee(L_I), ...localGet(P_N), I32_LT_U, BR_IF, 0,
    END,
  ];
  return kernelModule({ exportName: "ke", params: 4, locals: [[3, I32], [9, V128]], body });
}

type KeFn = (m: number, k: number, e: number, pairs: number) => void;

const newKernel = kernelFactory<KeFn>(ellipticModule, "ke");
let kernel: Kernel<KeFn> | null | undefined;
const ellipticWasmSwitch = kernelSwitch();

/** Switches the SIMD kernel of the elliptic integrals on or off (coils.ts ellipticKEMany runs instead; the same bits); returns the previous setting. */
export function setEllipticWasm(on: boolean): boolean {
  return ellipticWasmSwitch.set(on);
}

/**
 * K[i], E[i] of m[0 … n) (n ≤ MAX_POINTS) on the SIMD kernel, the same bits as ellipticKEMany; false (nothing
 * written) where WebAssembly SIMD is unavailable or switched off.
 */
export function ellipticKEWasm(m: Float64Array, n: number, K: Float64Array, E: Float64Array): boolean {
  if (!ellipticWasmSwitch.on() || n > MAX_POINTS) return false;
  if (kernel === undefined) {
    kernel = newKernel();
    if (kernel) reserveKernelMemory(kernel, 24 * MAX_POINTS);
  }
  if (!kernel) return false;
  if (n <= 0) return true;
  const f = kernel.f64;
  for (let i = 0; i < n; i++) f[i] = m[i]!;
  // an odd count: the last lane pair's second lane is m = 0 (its result unused)
  if (n % 2 === 1) f[n] = 0;
  kernel.run(0, 8 * MAX_POINTS, 16 * MAX_POINTS, (n + 1) >> 1);
  for (let i = 0; i < n; i++) {
    K[i] = f[MAX_POINTS + i]!;
    E[i] = f[2 * MAX_POINTS + i]!;
  }
  return true;
}
