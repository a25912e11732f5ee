/**
 * Memory estimate before the isochromats are made, and the refusal of a run
 * that would not fit. The isochromat count is estimated by sampling the
 * phantom on a coarse grid (the real sampler, fewer cells) and scaling.
 */
import { MAX_CLASS_LINES } from "../engine/fast.js";
import { MAX_STREAM_CLASSES } from "../engine/fast-stream.js";
import { availableParallelism, totalmem } from "node:os";
import { UserError } from "../errors.js";
import { r2prime, sampleCells, type IsoGeometry, type IsochromatOptions } from "../isochromats/index.js";
import type { Phantom } from "../phantom/index.js";
import type { Sequence } from "../sequence/types.js";
import { chunkIsochromatsFromEnv } from "./options.js";

/** Default engine workers: the cores Node may use. */
export function defaultWorkers(): number {
  return availableParallelism();
}

/** Default memory limit (bytes): 80 % of the machine's memory. */
export function defaultMemoryLimit(): number {
  return 0.8 * totalmem();
}

/**
 * Peak bytes per isochromat: the sampler's twelve arrays, allocated once at
 * their final size in shared memory (76 B), the RF class (4 B), and the
 * plan's per-isochromat indices and slack for the garbage collector. Rounded up.
 */
export const BYTES_PER_ISOCHROMAT = 160;

/** Per-worker scratch: state, relaxation factors per duration, readout groups (≈ 40 float64 per chunk isochromat). */
export const WORKER_SCRATCH_BYTES = chunkIsochromatsFromEnv() * 8 * 48;

/**
 * Streamed fast operator (engine/fast-stream.ts): bytes per sampled cell
 * entry (through-slice index 4 B, tissue 4 B, fraction 8 B) and per column
 * (read, phase, place, isochromat and entry starts: 5 × 4 B), doubled for the
 * growing arrays while sampling.
 */
export const BYTES_PER_CELL = 2 * 16;
export const BYTES_PER_COLUMN = 2 * 20;
/**
 * Time segments and line ranks the streamed grid estimate allows for: typical
 * figures, not ceilings (the 128² demo and the 256² torso use 11–12 segments
 * and 7–8 ranks; engine/fast.ts allows up to 48 and 24).
 */
export const STREAM_SEGMENTS = 16;
export const STREAM_RANKS = 8;
/** Folded grids of one block of read columns: engine/fast.ts BLOCK_BYTES, or one read column when larger. */
export const STREAM_BLOCK_BYTES = 2 * 2 ** 20;

export interface MemoryEstimate {
  isochromats: number;
  /** The fast operator streams its weights from the cells: cells and grids instead of isochromats. */
  streamed?: boolean;
  /** Range (m) of the sampled grid along read and phase, from the coarse sampling. */
  extent?: { read: [number, number]; phase: [number, number] };
  bytes: number;
  isochromatBytes: number;
  kspaceBytes: number;
  workerBytes: number;
}

/** Estimated isochromat count: the real sampler on a grid coarser by f in-plane, density 1, ≤ 4 through-slice, scaled up. */
export function estimateIsochromats(ph: Phantom, geo: IsoGeometry, fieldT: number, iso: IsochromatOptions, matrix: number): number {
  return estimateSampling(ph, geo, fieldT, iso, matrix).count;
}

function estimateSampling(ph: Phantom, geo: IsoGeometry, fieldT: number, iso: IsochromatOptions, matrix: number): { count: number; columns: number; cells: number; extent: { read: [number, number]; phase: [number, number] } } {
  const f = Math.max(1, Math.ceil(matrix / 64));
  const sc = Math.min(iso.sliceCount, 4);
  // the cells alone: their count, columns and extent are those of the isochromats they expand to
  const coarse = sampleCells(ph, { ...geo, dx: geo.dx * f, dy: geo.dy * f }, fieldT, { ...iso, density: 1, sliceCount: sc, t2primeIsochromats: 1 });
  // a voxel's T2′ spread of n values is shared among its density² columns in pairs where
  // n/2 is a whole multiple of density² (isochromats/spread.ts spreadAssignment); else every column carries all n
  // tissues with T2′ in closed form (or none) carry no spread
  const spreading = ph.tissues.some((t, i) => iso.t2primeClosed?.[i] !== true && r2prime(t.t2, t.t2star) > 0);
  const n = spreading ? iso.t2primeIsochromats ?? 1 : 1, d2 = iso.density * iso.density, pairs = n >> 1;
  const spread = n % 2 === 0 && d2 > 1 && pairs >= d2 && pairs % d2 === 0 ? n / d2 : n;
  const inPlane = (f * iso.density) ** 2;
  const columns = Math.ceil(coarse.columns * inPlane);
  // cells: at most one per isochromat; each coarse isochromat without T2′ spread stands for one tissue and peak of a cell
  return {
    count: Math.ceil(coarse.count * inPlane * (iso.sliceCount / sc) * spread), columns,
    cells: Math.ceil(coarse.count * inPlane * (iso.sliceCount / sc)), extent: { read: coarse.extent.read, phase: coarse.extent.phase },
  };
}

/**
 * Bytes a run needs at its peak: isochromats, k-space (total, block sum,
 * partials in flight), worker scratch. `streamed`: the fast operator streams
 * its weights from the cells (no isochromat stored), so the cells and the
 * operator's grids take the isochromats' place: per coil and time segment the
 * phase-transformed lines (lines × read grid length × 16 B, the read grid
 * being the read samples × the in-plane density), and one block of folded grids.
 * Where the run later stores its isochromats after all, the check runs again
 * before they are made (api.ts beforeIsochromats, `stored`).
 */
/** Per RF class of a B0 model streamed (engine/fast-stream.ts): w, Δf, r1, r2 (32 B), hash key and slot (~40 B), RF maps (96 B per pulse). */
const BYTES_PER_B0_CLASS = 168;

export function estimateMemory(ph: Phantom, geo: IsoGeometry, fieldT: number, iso: IsochromatOptions, seq: Sequence, workers: number, coils = 1, streamed = false): MemoryEstimate {
  const matrix = Math.max(seq.kspace.read, seq.kspace.phase);
  const { count: n, columns, cells, extent } = estimateSampling(ph, geo, fieldT, iso, matrix);
  const ks = coils * seq.kspace.slice * seq.kspace.phase * seq.kspace.read * 16;
  const isochromatBytes = streamed
    ? cells * BYTES_PER_CELL + columns * BYTES_PER_COLUMN + coils * STREAM_SEGMENTS * seq.kspace.slice * seq.kspace.phase * seq.kspace.read * iso.density * 16 +
      Math.max(STREAM_BLOCK_BYTES, seq.kspace.phase * iso.density * coils * STREAM_RANKS * STREAM_SEGMENTS * 16) +
      // a B0 model: the class id of every isochromat (4 B) and up to one class each, at most as many as the line factor holds (table, hash keys, RF maps)
      (ph.b0 ? n * 4 + Math.min(n, MAX_STREAM_CLASSES, Math.floor(MAX_CLASS_LINES / Math.max(1, seq.blocks.filter((b) => b.kind === "adc").length))) * BYTES_PER_B0_CLASS : 0)
    : n * (BYTES_PER_ISOCHROMAT + 16 * (coils > 1 ? coils : 0));
  const kspaceBytes = ks * (4 + 3 * workers + 4);
  const workerBytes = workers * WORKER_SCRATCH_BYTES;
  return { isochromats: n, ...(streamed ? { streamed } : {}), extent, bytes: isochromatBytes + kspaceBytes + workerBytes, isochromatBytes, kspaceBytes, workerBytes };
}

function gib(b: number): string {
  // below 0.1 GiB in MiB (a limit of 1 MiB read "0.0 GiB")
  return b < 0.1 * 2 ** 30 ? `${(b / 2 ** 20).toFixed(1)} MiB` : `${(b / 2 ** 30).toFixed(1)} GiB`;
}

/**
 * Throws a UserError with the estimate and what would fit when the estimate exceeds `limit` bytes. `asked`: the
 * isochromat options as asked for; `at(change)`: the estimate had `change` been asked for (the through-slice count
 * raised and T2′ decided as for this run), so that every option suggested is one that fits.
 */
export function checkMemory(e: MemoryEstimate, limit: number, asked: IsochromatOptions, at?: (change: Partial<IsochromatOptions>) => MemoryEstimate): void {
  if (e.bytes <= limit) return;
  const room = limit - e.kspaceBytes - e.workerBytes;
  const fit = Math.max(0, Math.floor(room / (e.isochromatBytes / Math.max(1, e.isochromats))));
  const ways: string[] = [];
  if (at) {
    // the first value of each option, from the least change down, whose own estimate fits
    const first = (flag: string, key: "density" | "sliceCount" | "t2primeIsochromats", values: number[]) => {
      for (const v of values) {
        if (at({ [key]: v }).bytes <= limit) {
          ways.push(`${flag} ${v}`);
          return;
        }
      }
    };
    first("--density", "density", Array.from({ length: asked.density - 1 }, (_, k) => asked.density - 1 - k));
    const n = asked.t2primeIsochromats ?? 1;
    const halves: number[] = [];
    for (let v = Math.floor(n / 2); v >= 1; v = Math.floor(v / 2)) halves.push(v);
    first("--t2prime-isochromats", "t2primeIsochromats", halves);
    const s = asked.sliceCount, fewer: number[] = [];
    for (let v = Math.floor((s * 3) / 4); v >= 1 && fewer.length < 8; v = Math.floor((v * 3) / 4)) fewer.push(v);
    first("--slice-isochromats", "sliceCount", fewer);
    if (ways.length === 0) {
      // no one option alone: the first pair of a lower density and a smaller T2′ spread that fits (a voxel's spread is
      // shared among its density² columns, so the two together cut what neither cuts alone)
      pairs: for (let d = asked.density - 1; d >= 1; d--) {
        for (const v of halves) {
          if (at({ density: d, t2primeIsochromats: v }).bytes <= limit) {
            ways.push(`--density ${d} --t2prime-isochromats ${v} (together)`);
            break pairs;
          }
        }
      }
    }
  } else {
    const r = fit / Math.max(1, e.isochromats);
    const d = Math.floor(asked.density * Math.sqrt(r));
    if (d >= 1 && d < asked.density) ways.push(`--density ${d}`);
    const s = Math.floor(asked.sliceCount * r);
    if (s >= 1 && s < asked.sliceCount) ways.push(`--slice-isochromats ${s}`);
  }
  const cm = (r: [number, number]) => `${(r[0] * 100).toFixed(1)} … ${(r[1] * 100).toFixed(1)} cm`;
  const span = e.extent ? ` over read ${cm(e.extent.read)} and phase ${cm(e.extent.phase)} (every shape's whole extent, so tissue outside the FOV wraps)` : "";
  const how = ways.length > 0
    ? `; about ${fit.toLocaleString("en")} would fit: try ${ways.join(" or ")}`
    : at
      ? `; about ${fit.toLocaleString("en")} would fit, and no lower --density, --t2prime-isochromats or --slice-isochromats (alone, or density and spread together) gets there: lower the matrix, or run with a larger --max-memory on a machine with more memory`
      : "; lower --density, --slice-isochromats or the matrix";
  if (e.streamed) {
    throw new UserError(
      `--max-memory: the run needs an estimated ${gib(e.bytes)} (fast operator streamed from the sampled cells, none of the ${e.isochromats.toLocaleString("en")} isochromats stored: cells and grids ${gib(e.isochromatBytes)}${span}, ` +
        `k-space ${gib(e.kspaceBytes)}, workers ${gib(e.workerBytes)}), over the limit of ${gib(limit)}${ways.length > 0 ? `; try ${ways.join(" or ")}` : "; lower the matrix or --density"}`,
    );
  }
  throw new UserError(
    `--max-memory: the run needs an estimated ${gib(e.bytes)} (${e.isochromats.toLocaleString("en")} isochromats × ${BYTES_PER_ISOCHROMAT} B${span}, ` +
      `k-space ${gib(e.kspaceBytes)}, workers ${gib(e.workerBytes)}), over the limit of ${gib(limit)}${how}`,
  );
}
