#!/usr/bin/env node
/**
 * isofold command line. Commands wire the stages; no physics lives here.
 * User errors print one line and exit 2; nothing is written.
 */
import { Command, InvalidArgumentError, Option } from "commander";
import { existsSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { UserError } from "../errors.js";
import { run, version, defaultIsochromatOptions, SAFETY_NOTE } from "./pipeline.js";

function intArg(name: string, min: number, max: number) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isInteger(n) || n < min || n > max) throw new InvalidArgumentError(`${name} must be a whole number from ${min} to ${max}`);
    return n;
  };
}
function numArg(name: string, min: number, max: number) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isFinite(n) || n < min || n > max) throw new InvalidArgumentError(`${name} must be a number from ${min} to ${max}`);
    return n;
  };
}
function collect(v: string, prev: string[]): string[] {
  return [...prev, v];
}

/** Repository root (holds phantoms/), from the compiled file's place: dist/src/cli → ../../.. */
export function repoRoot(): string {
  const here = dirname(fileURLToPath(import.meta.url));
  for (const up of ["../../..", "../.."]) {
    const r = resolve(here, up);
    if (existsSync(join(r, "phantoms"))) return r;
  }
  return resolve(here, "../../..");
}

function isoOptions(o: { density: number; sliceIsochromats: number; sliceExtent: number; fatModel: "single" | "multi" }) {
  return { ...defaultIsochromatOptions(), density: o.density, sliceCount: o.sliceIsochromats, sliceExtent: o.sliceExtent, fatModel: o.fatModel };
}

function addSimulationOptions(c: Command): Command {
  return c
    .option("--seed <n>", "seed for every random choice (noise, perturbations); integer", intArg("--seed", 0, 2 ** 31 - 1), 1)
    .option("--density <n>", "isochromats per voxel along each in-plane axis (read, phase); 1–16", intArg("--density", 1, 16), 2)
    .option("--slice-isochromats <n>", "isochromats through the slice profile; 1–4096", intArg("--slice-isochromats", 1, 4096), 12)
    .option("--slice-extent <k>", "span of the through-slice isochromats, in slice thicknesses (covers the profile's skirts); 0.1–20", numArg("--slice-extent", 0.1, 20), 3)
    .addOption(new Option("--fat-model <model>", "fat spectrum: single (−3.4 ppm peak) or multi (six-peak)").choices(["single", "multi"]).default("multi"))
    .option("-q, --quiet", "no progress line on stderr");
}

const program = new Command();
program
  .name("isofold")
  .description(
    "MR encoding simulator: drives spin isochromats of a numeric phantom through a pulse sequence with the Bloch equations, " +
      "fills k-space, reconstructs by FFT and writes PNG, NumPy (.npy), NIfTI and a JSON report.\n" + SAFETY_NOTE,
  )
  .version(version())
  .showHelpAfterError("(run with --help for usage)");

addSimulationOptions(
  program
    .command("simulate")
    .description("simulate one protocol on one phantom and write a run folder")
    .argument("<phantom>", "phantom file (JSON), e.g. phantoms/two-bottle.json")
    .requiredOption("-p, --protocol <file>", "protocol file (JSON) or bundled preset name")
    .option("-s, --set <key=value>", 'override a protocol value, repeatable, e.g. --set fov.phase="16 cm" --set te="8 ms"', collect, [])
    .option("-o, --out <dir>", "output folder for the run", "out/run"),
).action((phantom: string, o) => {
  const r = run({ phantom, protocol: o.protocol, sets: o.set, out: o.out, seed: o.seed, iso: isoOptions(o), quiet: o.quiet });
  console.log(`wrote ${r.files.length} files to ${r.dir} in ${r.seconds.toFixed(1)} s: ${r.files.join(", ")}`);
});

addSimulationOptions(
  program
    .command("demo")
    .description("run a bundled protocol on the bundled two-bottle phantom and say where the files are")
    .option("-o, --out <dir>", "output folder", "out/demo"),
).action((o) => {
  const root = repoRoot();
  const phantom = join(root, "phantoms", "two-bottle.json");
  const r = run({ phantom, protocol: "gre-demo-1.5t", sets: [], out: o.out, seed: o.seed, iso: isoOptions(o), quiet: o.quiet });
  console.log(`demo: 2D spoiled gradient echo of ${phantom} at 1.5 T`);
  console.log(`wrote ${r.files.join(", ")} to ${resolve(r.dir)} in ${r.seconds.toFixed(1)} s`);
  console.log(`look at ${join(r.dir, "image.png")}; the oil bottle sits shifted along the readout by the fat–water shift`);
});

async function main(): Promise<void> {
  try {
    await program.parseAsync(process.argv);
  } catch (e) {
    if (e instanceof UserError) {
      process.stderr.write(`isofold: error: ${e.message}\n`);
      process.exit(2);
    }
    throw e;
  }
}

main().catch((e: unknown) => {
  process.stderr.write(`isofold: internal error: ${(e as Error).stack ?? String(e)}\n`);
  process.exit(1);
});
