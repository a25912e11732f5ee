#!/usr/bin/env node
/**
 * isofold command line. Commands wire the stages; no physics lives here.
 * User errors print one line and exit 2; nothing is written.
 */
import { Command, CommanderError } from "commander";
import { join, resolve } from "node:path";
import { UserError } from "../errors.js";
import { run, version, SAFETY_NOTE } from "./pipeline.js";
import { addSimulationOptions, collect, engineOptions, isoOptions, repoRoot } from "./options.js";
import { addCoilOptions, coilRunFor, registerDataset } from "./dataset.js";
import { registerProtocol } from "./protocol.js";
import { registerMerge } from "./merge.js";
import { registerCheck } from "./check.js";
import { registerValidate } from "./validate.js";
import { registerSweep } from "./sweep.js";
import { registerPreview } from "./preview.js";
import { AbortedError } from "../engine/index.js";
import { EXIT_WRITE_FAILED, OutputWriteError, withOutputDir } from "../io/outpath.js";

const program = new Command();
program
  .name("isofold")
  .description(
    "MR encoding simulator: drives spin isochromats of a numeric phantom through a pulse sequence with the Bloch equations, " +
      "fills k-space, reconstructs by FFT and writes PNG, NumPy (.npy), NIfTI and a JSON report.\n" + SAFETY_NOTE,
  )
  .version(version())
  // usage errors are one line like every other user error
  .configureOutput({
    outputError: (str, write) => write(`isofold: ${str.trim().replace(/\s*\n\s*/g, " ")} (run with --help for usage)\n`),
  })
  // usage errors (a bad or missing option) exit 2 like every other user error
  .exitOverride();

addSimulationOptions(
  addCoilOptions(program
    .command("simulate")
    .description("simulate one protocol on one phantom and write a run folder")
    .argument("<phantom>", "phantom file (JSON), e.g. phantoms/two-bottle.json")
    .requiredOption("-p, --protocol <file>", "protocol file (JSON) or bundled preset name")
    .option("-s, --set <key=value>", 'override a protocol value, repeatable, e.g. --set fov.phase="16 cm" --set te="8 ms"', collect, [])
    .option("-o, --out <dir>", "output folder for the run", "out/run")
    .option("--truth", "also write the ground-truth maps on the image grid of the middle slice (index ⌊S/2⌋ of the slice axis: the middle slice of a stack, the middle slice-encoding step of a 3D slab; the slice report.json measures the fat shift on): pd, t1 (s), t2 (s), t2star (s), df (Hz), fat fraction and tissue labels, as truth-*.png and truth-*.npy [phase, read]"),
  "; the run folder then also holds each coil's image (coil-images.npy, coils.png), the sensitivities and their root-sum-of-squares (coil-rss.png)"),
).action(async (phantom: string, o) => {
  const r = await withOutputDir(o.out, () => run({
    phantom, protocol: o.protocol, sets: o.set, out: o.out, seed: o.seed, iso: isoOptions(o), quiet: o.quiet, truth: o.truth === true, ...engineOptions(o),
    coilRun: coilRunFor(phantom, o),
    // the memory estimate with the coils the engine carries (--coils N: N loops)
    ...(Number(o.coils) >= 2 ? { memoryCoils: Number(o.coils) } : {}),
  }));
  if (o.shard) {
    console.log(`shard ${o.shard[0]}/${o.shard[1]}: wrote ${r.files.join(", ")} to ${r.dir} in ${r.seconds.toFixed(1)} s; combine the shards with: isofold merge <shard folders...> --out <dir>`);
    return;
  }
  console.log(`wrote ${r.files.length} files to ${r.dir} in ${r.seconds.toFixed(1)} s: ${r.files.join(", ")}`);
});

addSimulationOptions(
  program
    .command("demo")
    .description("run the bundled protocol gre-demo-1.5t (a 2D spoiled gradient echo at 1.5 T; `isofold protocol gre-demo-1.5t` prints it) on the bundled two-bottle phantom and say where the files are")
    .option("-o, --out <dir>", "output folder", "out/demo"),
).action(async (o) => {
  const root = repoRoot();
  const phantom = join(root, "phantoms", "two-bottle.json");
  if (o.shard) throw new UserError("--shard: demo writes a whole run; use simulate --shard i/N");
  const r = await withOutputDir(o.out, () => run({ phantom, protocol: "gre-demo-1.5t", sets: [], out: o.out, seed: o.seed, iso: isoOptions(o), quiet: o.quiet, ...engineOptions(o) }));
  console.log(`demo: 2D spoiled gradient echo of ${phantom} at 1.5 T`);
  console.log(`wrote ${r.files.join(", ")} to ${resolve(r.dir)} in ${r.seconds.toFixed(1)} s`);
  console.log(`look at ${join(r.dir, "image.png")}; the oil bottle sits shifted along the readout by the fat–water shift`);
});

registerDataset(program);
registerProtocol(program);
registerMerge(program);
registerCheck(program);
registerValidate(program);
registerSweep(program);
registerPreview(program);
// the safety note closes every subcommand's --help
for (const c of program.commands) c.addHelpText("after", `\n${SAFETY_NOTE}`);

async function main(): Promise<void> {
  try {
    await program.parseAsync(process.argv);
  } catch (e) {
    if (e instanceof CommanderError) {
      // commander has printed its message; help and version end with exit code 0
      process.exit(e.exitCode === 0 ? 0 : 2);
    }
    if (e instanceof UserError) {
      process.stderr.write(`isofold: error: ${e.message}\n`);
      process.exit(2);
    }
    if (e instanceof OutputWriteError) {
      process.stderr.write(`isofold: error: ${e.message}\n`);
      process.exit(EXIT_WRITE_FAILED);
    }
    if (e instanceof AbortedError) {
      process.stderr.write("isofold: interrupted; workers stopped, no output written\n");
      process.exit(130);
    }
    throw e;
  }
}

main().catch((e: unknown) => {
  process.stderr.write(`isofold: internal error: ${(e as Error).stack ?? String(e)}\n`);
  process.exit(1);
});
