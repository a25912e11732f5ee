/**
 * `isofold merge <parts...> --out <dir>`: adds the block sums of shards in
 * block order (the order a single run uses) and writes the normal run folder,
 * bitwise the k-space of the unsharded run.
 */
import type { Command } from "commander";
import { UserError } from "../errors.js";
import { buildSequence } from "../sequence/index.js";
import { addInto, type KSpace } from "../engine/index.js";
import { loadPhantom, readRealNpy } from "./inputs.js";
import { finish, type RunContext } from "./pipeline.js";
import { readPartial } from "./partial.js";
import { withOutputDir } from "../io/outpath.js";

export interface MergeResult {
  dir: string;
  files: string[];
  seconds: number;
}

/** Checks that the parts belong to one run and cover every block once; returns the merged k-space and the run context. */
export async function mergeParts(paths: string[], out: string): Promise<MergeResult> {
  const t0 = Date.now();
  if (paths.length === 0) throw new UserError("merge: name at least one shard folder");
  const parts = paths.map(readPartial);
  const first = parts[0]!.meta;
  for (const p of parts) {
    if (p.meta.inputHash !== first.inputHash) {
      throw new UserError(`comes from other inputs than ${parts[0]!.source} (protocol, phantom, isochromat options or seed differ); merge only the shards of one run`, p.source, "inputHash");
    }
    if (p.meta.totalBlocks !== first.totalBlocks || p.meta.shape.slice(1).join(",") !== first.shape.slice(1).join(",")) {
      throw new UserError(`does not match ${parts[0]!.source} in block count or k-space shape`, p.source);
    }
  }
  parts.sort((a, b) => a.meta.blocks[0] - b.meta.blocks[0] || a.meta.blocks[1] - b.meta.blocks[1]);
  let at = 0;
  for (const p of parts) {
    const [b0, b1] = p.meta.blocks;
    if (b0 < at) throw new UserError(`blocks ${b0}–${b1 - 1} overlap another part (the same shard given twice?)`, p.source, "blocks");
    if (b0 > at) throw new UserError(`missing blocks ${at}–${b0 - 1} of ${first.totalBlocks}: add the shard that holds them`, p.source, "blocks");
    at = b1;
  }
  if (at !== first.totalBlocks) {
    throw new UserError(`missing blocks ${at}–${first.totalBlocks - 1} of ${first.totalBlocks}: add the remaining shards (of ${first.shard[1]})`, parts[parts.length - 1]!.source, "blocks");
  }
  const [, coils, sliceSteps, phase, read] = first.shape as [number, number, number, number, number];
  const size = coils * sliceSteps * phase * read;
  const re = new Float64Array(size), im = new Float64Array(size);
  for (const p of parts) {
    const nb = p.meta.blocks[1] - p.meta.blocks[0];
    for (let k = 0; k < nb; k++) addInto(re, im, p.re.subarray(k * size, (k + 1) * size), p.im.subarray(k * size, (k + 1) * size));
  }
  const protocol = first.protocol;
  const seq = buildSequence(protocol);
  const kspace: KSpace = { coils, rows: sliceSteps * phase, read, re, im };
  const ctx: RunContext = {
    protocol, seqs: [seq],
    phantom: loadPhantom(first.inputs.phantom, protocol.field, { readArray: readRealNpy }),
    o: {
      phantom: first.inputs.phantom, protocol: first.inputs.protocol, sets: first.inputs.sets, seed: first.inputs.seed, iso: first.inputs.iso, out,
      truth: first.inputs.truth === true,
    },
    isoSummary: { ...first.isoSummary, spreads: first.isoSummary.spreads ?? [] },
    engine: { ...first.engine, shards: first.shard[1] },
  };
  const r = await finish(ctx, [kspace], t0);
  return { dir: r.dir, files: r.files, seconds: r.seconds };
}

export function registerMerge(program: Command): void {
  program
    .command("merge")
    .description("add the partial k-spaces of the shards of one run (simulate --shard i/N) and write the normal run folder")
    .argument("<parts...>", "shard output folders (or their partial.json)")
    .option("-o, --out <dir>", "output folder for the merged run", "out/run")
    .action(async (parts: string[], o: { out: string }) => {
      const r = await withOutputDir(o.out, () => mergeParts(parts, o.out));
      console.log(`merged ${parts.length} parts; wrote ${r.files.length} files to ${r.dir} in ${r.seconds.toFixed(1)} s: ${r.files.join(", ")}`);
    });
}
