import type { Protocol } from "../protocol/types.js";
import { buildBssfp } from "./bssfp.js";
import { buildEpi } from "./epi.js";
import { buildGre } from "./gre.js";
import { buildRare } from "./rare.js";
import { buildSe } from "./se.js";
import type { Sequence } from "./types.js";

export * from "./types.js";
export { minTrapezoid, GRAD_RASTER } from "./trapezoid.js";
export { makePulse, profileReach as pulseProfileReach } from "./rf.js";
export { readoutPlan, phasePlan, relativeSnr, SNR_REFERENCE } from "./common.js";

/** Builds the Sequence a protocol describes. */
export function buildSequence(p: Protocol): Sequence {
  switch (p.sequence) {
    case "gre":
    case "gre3d":
      return buildGre(p);
    case "se":
      return buildSe(p);
    case "bssfp":
      return buildBssfp(p);
    case "rare":
      return buildRare(p);
    case "epi":
      return buildEpi(p);
  }
}
export { pathwayMoments, aliasFreeCount, type PathwayMoments } from "./pathways.js";
