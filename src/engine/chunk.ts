/**
 * Plays the plan's ops over one chunk of isochromats and accumulates the
 * chunk's k-space. Pure function of (plan, isochromats, chunk index): the same
 * chunk gives the same bits on any thread. Three parts, each with its own
 * scratch: the general path (general.ts), the ideally spoiled shortcut
 * (spoiled.ts) and the readout both share (readout.ts).
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { GeneralScratch, runChunkGeneral } from "./general.js";
import type { EnginePlan } from "./plan.js";
import { ReadoutScratch } from "./readout.js";
import { SpoiledScratch, runChunkSpoiled } from "./spoiled.js";

export { GeneralScratch, runChunkGeneral, SUB_BLOCK } from "./general.js";
export { SpoiledScratch, runChunkSpoiled } from "./spoiled.js";
export { ReadoutScratch, readoutGroups, receiverFilter } from "./readout.js";

/**
 * Scratch of one thread's chunks of one plan: the readout's, and the general
 * path's or the shortcut's (made on first use: a plan plays one of them).
 */
export class ChunkScratch {
  readonly readout: ReadoutScratch;
  general: GeneralScratch | null = null;
  spoiled: SpoiledScratch | null = null;
  constructor(plan: EnginePlan) {
    this.readout = new ReadoutScratch(plan);
  }
}

/**
 * Runs chunk `c`; adds its signal into outRe/outIm ([coil][row][read],
 * row-major). Takes the exact spoiled shortcut (runChunkSpoiled) when the
 * plan allows it, else plays every op per isochromat (runChunkGeneral).
 */
export function runChunk(plan: EnginePlan, iso: IsochromatSet, c: number, outRe: Float64Array, outIm: Float64Array, s: ChunkScratch): void {
  // (with the readout fold, fold.ts, the shortcut hands its group sums to foldOutput)
  if (plan.classState) runChunkSpoiled(plan, iso, c, outRe, outIm, (s.spoiled ??= new SpoiledScratch(plan, iso)), s.readout);
  else runChunkGeneral(plan, iso, c, outRe, outIm, (s.general ??= new GeneralScratch(plan)), s.readout);
}
