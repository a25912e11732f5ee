/**
 * The one place the dataset generator runs the engine: every coil of the
 * array plus the uniform coil (coil 0) in one pass, sensitivities applied per
 * isochromat before the readout (exact). Isochromats are simulated in blocks
 * of whole columns so that the sensitivity array (2·coils·isochromats
 * numbers) stays within SENS_BUDGET; the signal is linear in the
 * isochromats, so block k-spaces add. Each block runs on the executor the
 * caller gives (worker_threads in Node, Web Workers or serial in a browser;
 * bitwise the same k-space whichever runs it), so this module needs no Node.
 */
import { simulateCells, simulateWith, type EnginePlan, type Executor, type KSpace } from "../engine/index.js";
import type { ReadoutChoice, ReadoutReport } from "../engine/fast.js";
import { ISOCHROMAT_FLOAT_ARRAYS, ISOCHROMAT_INT_ARRAYS, mapIsochromatArrays, type IsochromatCells, type IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { coilCount, sensitivitiesAt, uniformAndLoops, type CoilArray } from "./coils.js";

/** Largest sensitivity array per block, in numbers (Float64): 32 M = 256 MB. */
export const SENS_BUDGET = 32 * 1024 * 1024;

/** Columns c0 … c1−1 of an isochromat set, as a set of its own (arrays are views). */
export function subsetColumns(iso: IsochromatSet, c0: number, c1: number): IsochromatSet {
  const s0 = iso.colStart[c0]!, s1 = iso.colStart[c1]!;
  const colStart = new Int32Array(c1 - c0 + 1);
  for (let k = 0; k <= c1 - c0; k++) colStart[k] = iso.colStart[c0 + k]! - s0;
  const views = mapIsochromatArrays(iso, [...ISOCHROMAT_INT_ARRAYS, ...ISOCHROMAT_FLOAT_ARRAYS], (a) => a.subarray(s0, s1) as typeof a);
  return { ...views, count: s1 - s0, colStart, columns: c1 - c0 };
}

/**
 * k-space [coil][row][read] for coil 0 = uniform (S = 1) and coils 1…C of
 * the array (C = coilCount; for the uniform array only coil 0).
 */
/** What the coil runs read: stored isochromats, or the sampled cells with the isochromats made on first use (a prepared slice). */
export type CoilSource = IsochromatSet | { cells: IsochromatCells; readonly iso: IsochromatSet };

export async function simulateCoils(
  seq: Sequence, iso: CoilSource, array: CoilArray, receiverFilter: boolean, executor: Executor,
  onProgress?: (done: number, total: number) => void,
  engine: CoilEngineOptions = {},
): Promise<KSpace> {
  return (await simulateCoilsPlanned(seq, iso, array, receiverFilter, executor, onProgress, engine)).kspace;
}

/** Engine options of a coil run: chunk size, kernels, and the readout operator with its tolerance (as `simulate --readout/--tolerance`). */
export interface CoilEngineOptions {
  chunkIsochromats?: number;
  wasm?: boolean;
  readout?: ReadoutChoice;
  tolerance?: number;
}

/** simulateCoils, also returning the engine plan (of the last block) and what the readout operator did (one report per block). */
export async function simulateCoilsPlanned(
  seq: Sequence, src: CoilSource, array: CoilArray, receiverFilter: boolean, executor: Executor,
  onProgress?: (done: number, total: number) => void,
  engine: CoilEngineOptions = {},
): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport[] }> {
  const C = array.elements === 0 ? 1 : coilCount(array) + 1;
  if (!("cells" in src)) return storedCoils(seq, src, array, C, receiverFilter, executor, onProgress, engine);
  // Where the fast operator applies, the sensitivities multiply its per-position
  // weights (engine/fast-stream.ts): per column and through-slice cell, at the
  // cell centre (the position of that cell's isochromats), no isochromat stored;
  // a coil then costs its share of the fold and an FFT per (rank, segment).
  const opts = { receiverFilter, onProgress, ...engine };
  const exec = executor;
  const one = async (r: Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }>) => {
    const x = await r;
    return { kspace: x.kspace, plan: x.plan, readout: [x.readout] };
  };
  if (C === 1) return one(simulateCells(exec, seq, src.cells, () => src.iso, opts));
  let storedReports: ReadoutReport[] | null = null;
  const res = await one(simulateCells(exec, seq, src.cells, () => src.iso, opts, {
    sens: {
      coils: C,
      at: (x, y, z, n, out) => uniformAndLoops(array, x, y, z, n, out),
      // plain data: a helper thread can evaluate the same sensitivities (engine/fast-phase.ts)
      loops: array,
    },
    stored: async (o) => {
      const r = await storedCoils(seq, src.iso, array, C, receiverFilter, executor, onProgress, { ...engine, readout: o.readout });
      storedReports = r.readout;
      return { kspace: r.kspace, plan: r.plan, readout: r.readout[0]! };
    },
  }));
  // the stored path ran per block: keep every block's report (the first carries the choice and fallback)
  if (storedReports !== null) res.readout = [res.readout[0]!, ...(storedReports as ReadoutReport[]).slice(1)];
  return res;
}

/** Every coil per isochromat (sensitivities stored per isochromat, in blocks of columns). */
async function storedCoils(
  seq: Sequence, iso: IsochromatSet, array: CoilArray, C: number, receiverFilter: boolean, executor: Executor,
  onProgress?: (done: number, total: number) => void,
  engine: CoilEngineOptions = {},
): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport[] }> {
  if (C === 1) {
    const r = await simulateWith(executor, seq, iso, { receiverFilter, onProgress, ...engine });
    return { kspace: r.kspace, plan: r.plan, readout: [r.readout] };
  }
  const readout: ReadoutReport[] = [];
  let plan: EnginePlan | null = null;
  const perBlock = Math.max(1, Math.floor(SENS_BUDGET / (2 * C)));
  const blocks: [number, number][] = [];
  let c0 = 0;
  for (let c = 1; c <= iso.columns; c++) {
    if (iso.colStart[c]! - iso.colStart[c0]! >= perBlock || c === iso.columns) {
      blocks.push([c0, c]);
      c0 = c;
    }
  }
  const rows = seq.kspace.slice * seq.kspace.phase, read = seq.kspace.read;
  const re = new Float64Array(C * rows * read), im = new Float64Array(C * rows * read);
  for (let k = 0; k < blocks.length; k++) {
    const [a, b] = blocks[k]!;
    const sub = subsetColumns(iso, a, b);
    const sens = new Float64Array(2 * C * sub.count);
    sensitivitiesAt({ ...array, elements: 0 }, sub.x, sub.y, sub.z, sub.count, sens, sub.count, 0);
    sensitivitiesAt(array, sub.x, sub.y, sub.z, sub.count, sens, sub.count, 1);
    const { kspace, plan: p, readout: rep } = await simulateWith(executor, seq, sub, {
      receiverFilter, coils: C, sens, ...engine,
      onProgress: (d, t) => onProgress?.(k * t + d, blocks.length * t),
    });
    plan = p;
    readout.push(rep);
    for (let i = 0; i < re.length; i++) {
      re[i] = re[i]! + kspace.re[i]!;
      im[i] = im[i]! + kspace.im[i]!;
    }
  }
  return { kspace: { coils: C, rows, read, re, im }, plan: plan!, readout };
}
