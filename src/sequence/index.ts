import type { Protocol } from "../protocol/types.js";
import { sequenceDefinition } from "./registry.js";
import type { Sequence } from "./types.js";

export * from "./types.js";
export { minTrapezoid, GRAD_RASTER } from "./trapezoid.js";
export { makePulse, profileReach as pulseProfileReach } from "./rf.js";
export { readoutPlan, phasePlan, relativeSnr, sliceStepCentre, SNR_REFERENCE } from "./common.js";
export { SEQUENCE_DEFINITIONS, sequenceDefinition } from "./registry.js";

/** Builds the Sequence a protocol describes. */
export function buildSequence(p: Protocol): Sequence {
  return sequenceDefinition(p.sequence).build(p);
}
export { pathwayMoments, aliasFreeCount, type PathwayMoments } from "./pathways.js";
