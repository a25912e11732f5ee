/**
 * The per-isochromat arrays of an IsochromatSet, listed once. A leaf with no
 * runtime imports, so the engine's workers can use it without loading the
 * phantom stage.
 */
import type { IsochromatSet } from "./index.js";

/** The per-isochromat arrays of an IsochromatSet, by element type: the one list of them. */
export const ISOCHROMAT_INT_ARRAYS = ["iu", "iv", "iw", "tissue", "peak"] as const;
export const ISOCHROMAT_FLOAT_ARRAYS = ["x", "y", "z", "m0", "r1", "r2", "df"] as const;
/** The per-isochromat arrays the engine reads (plan, chunks, workers). */
export const ENGINE_ARRAYS = ["iu", "iv", "iw", "m0", "r1", "r2", "df"] as const;

export type IsoArrays = { [K in (typeof ISOCHROMAT_INT_ARRAYS)[number]]: Int32Array } & { [K in (typeof ISOCHROMAT_FLOAT_ARRAYS)[number]]: Float64Array };

/** A set with every per-isochromat array replaced by f(array, name) (views, copies, shared copies). */
export function mapIsochromatArrays(iso: IsochromatSet, names: readonly (keyof IsoArrays)[], f: <T extends Int32Array | Float64Array>(a: T, name: string) => T): IsochromatSet {
  const out: Record<string, unknown> = { ...iso };
  for (const k of names) out[k] = f(iso[k] as Int32Array | Float64Array, k);
  return out as unknown as IsochromatSet;
}
