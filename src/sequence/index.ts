import type { Protocol } from "../protocol/types.js";
import { buildGre } from "./gre.js";
import { buildSe } from "./se.js";
import type { Sequence } from "./types.js";

export * from "./types.js";
export { minTrapezoid, GRAD_RASTER } from "./trapezoid.js";
export { makePulse } from "./rf.js";

/** Builds the Sequence a protocol describes. */
export function buildSequence(p: Protocol): Sequence {
  switch (p.sequence) {
    case "gre":
      return buildGre(p);
    case "se":
      return buildSe(p);
  }
}
