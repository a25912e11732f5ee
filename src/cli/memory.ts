/**
 * Memory estimate before the isochromats are made, and the refusal of a run
 * that would not fit. The isochromat count is estimated by sampling the
 * phantom on a coarse grid (the real sampler, fewer cells) and scaling.
 */
import { availableParallelism, totalmem } from "node:os";
import { UserError } from "../errors.js";
import { makeIsochromats, type IsoGeometry, type IsochromatOptions } from "../isochromats/index.js";
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

export interface MemoryEstimate {
  isochromats: number;
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

function estimateSampling(ph: Phantom, geo: IsoGeometry, fieldT: number, iso: IsochromatOptions, matrix: number): { count: number; extent: { read: [number, number]; phase: [number, number] } } {
  const f = Math.max(1, Math.ceil(matrix / 64));
  const sc = Math.min(iso.sliceCount, 4);
  const coarse = makeIsochromats(ph, { ...geo, dx: geo.dx * f, dy: geo.dy * f }, fieldT, { ...iso, density: 1, sliceCount: sc, t2primeIsochromats: 1 });
  // a voxel's T2′ spread of n values is shared among its density² columns (at least one value each)
  const spread = Math.max(1, Math.ceil((iso.t2primeIsochromats ?? 1) / (iso.density * iso.density)));
  return { count: Math.ceil(coarse.count * (f * iso.density) ** 2 * (iso.sliceCount / sc) * spread), extent: { read: coarse.extent.read, phase: coarse.extent.phase } };
}

/** Bytes a run needs at its peak: isochromats, k-space (total, block sum, partials in flight), worker scratch. */
export function estimateMemory(ph: Phantom, geo: IsoGeometry, fieldT: number, iso: IsochromatOptions, seq: Sequence, workers: number, coils = 1): MemoryEstimate {
  const matrix = Math.max(seq.kspace.read, seq.kspace.phase);
  const { count: n, extent } = estimateSampling(ph, geo, fieldT, iso, matrix);
  const ks = coils * seq.kspace.slice * seq.kspace.phase * seq.kspace.read * 16;
  const isochromatBytes = n * (BYTES_PER_ISOCHROMAT + 16 * (coils > 1 ? coils : 0));
  const kspaceBytes = ks * (4 + 3 * workers + 4);
  const workerBytes = workers * WORKER_SCRATCH_BYTES;
  return { isochromats: n, extent, bytes: isochromatBytes + kspaceBytes + workerBytes, isochromatBytes, kspaceBytes, workerBytes };
}

function gib(b: number): string {
  return `${(b / 2 ** 30).toFixed(1)} GiB`;
}

/** Throws a UserError with the estimate and what would fit when the estimate exceeds `limit` bytes. */
export function checkMemory(e: MemoryEstimate, limit: number, iso: IsochromatOptions): void {
  if (e.bytes <= limit) return;
  const room = limit - e.kspaceBytes - e.workerBytes;
  const fit = Math.max(0, Math.floor(room / (e.isochromatBytes / Math.max(1, e.isochromats))));
  const r = fit / Math.max(1, e.isochromats);
  const ways: string[] = [];
  const d = Math.floor(iso.density * Math.sqrt(r));
  if (d >= 1 && d < iso.density) ways.push(`--density ${d}`);
  const s = Math.floor(iso.sliceCount * r);
  if (s >= 1 && s < iso.sliceCount) ways.push(`--slice-isochromats ${s}`);
  const cm = (r: [number, number]) => `${(r[0] * 100).toFixed(1)} … ${(r[1] * 100).toFixed(1)} cm`;
  const span = e.extent ? ` over read ${cm(e.extent.read)} and phase ${cm(e.extent.phase)} (every shape's whole extent, so tissue outside the FOV wraps)` : "";
  const how = ways.length > 0 ? `; about ${fit.toLocaleString("en")} would fit: try ${ways.join(" or ")}` : "; lower --density, --slice-isochromats or the matrix";
  throw new UserError(
    `--max-memory: the run needs an estimated ${gib(e.bytes)} (${e.isochromats.toLocaleString("en")} isochromats × ${BYTES_PER_ISOCHROMAT} B${span}, ` +
      `k-space ${gib(e.kspaceBytes)}, workers ${gib(e.workerBytes)}), over the limit of ${gib(limit)}${how}`,
  );
}
