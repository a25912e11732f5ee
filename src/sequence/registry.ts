/**
 * The sequences isofold knows, each declared by its own module (name,
 * description, builder, defaults, what the pipeline must know). The protocol
 * parser reads names and defaults here; the pipeline reads the flags. Adding
 * a sequence: a module exporting a SequenceDefinition, and one entry below.
 */
import { BSSFP } from "./bssfp.js";
import { EPI } from "./epi.js";
import { GRE, GRE3D } from "./gre.js";
import { RARE } from "./rare.js";
import { SE } from "./se.js";
import type { SequenceDefinition } from "./types.js";

export const SEQUENCE_DEFINITIONS: readonly SequenceDefinition[] = [GRE, SE, GRE3D, BSSFP, RARE, EPI];

/** The definition of a sequence name; throws for a name no module declares (the protocol parser refuses those first). */
export function sequenceDefinition(name: string): SequenceDefinition {
  const d = SEQUENCE_DEFINITIONS.find((s) => s.name === name);
  if (!d) throw new Error(`no sequence named ${JSON.stringify(name)}`);
  return d;
}
