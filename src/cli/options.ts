/**
 * Shared option parsers and the simulation options every simulating command takes.
 */
import { Command, InvalidArgumentError, Option } from "commander";
import { existsSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { defaultIsochromatOptions, T2PRIME_MODELS, type T2primeModel } from "../isochromats/index.js";
import { CHUNK_ISOCHROMATS } from "../engine/index.js";

/**
 * Isochromats per engine chunk: CHUNK_ISOCHROMATS, or the environment
 * variable ISOFOLD_CHUNK_ISOCHROMATS (64 … 2^24; for tests and tuning — the
 * chunking is part of a result's definition; partial.json records it).
 */
export function chunkIsochromatsFromEnv(env: Record<string, string | undefined> = process.env): number {
  const v = env["ISOFOLD_CHUNK_ISOCHROMATS"];
  if (v === undefined || v === "") return CHUNK_ISOCHROMATS;
  const n = Number(v);
  if (!Number.isInteger(n) || n < 64 || n > 2 ** 24) throw new Error(`ISOFOLD_CHUNK_ISOCHROMATS must be a whole number from 64 to ${2 ** 24}, got "${v}"`);
  return n;
}

/** The WebAssembly SIMD kernels are used unless the environment sets ISOFOLD_NO_WASM (to anything but ""). */
export function wasmFromEnv(env: Record<string, string | undefined> = process.env): boolean {
  return !env["ISOFOLD_NO_WASM"];
}

export function intArg(name: string, min: number, max: number) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isInteger(n) || n < min || n > max) throw new InvalidArgumentError(`${name} must be a whole number from ${min} to ${max}`);
    return n;
  };
}
export function numArg(name: string, min: number, max: number) {
  return (v: string): number => {
    const n = Number(v);
    if (!Number.isFinite(n) || n < min || n > max) throw new InvalidArgumentError(`${name} must be a number from ${min} to ${max}`);
    return n;
  };
}
export function collect(v: string, prev: string[]): string[] {
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

export function isoOptions(o: { density: number; sliceIsochromats: number; sliceExtent: number; fatModel: "single" | "multi"; t2primeIsochromats?: number; t2primeModel?: T2primeModel }) {
  const d = defaultIsochromatOptions();
  return {
    ...d, density: o.density, sliceCount: o.sliceIsochromats, sliceExtent: o.sliceExtent, fatModel: o.fatModel, t2primeIsochromats: o.t2primeIsochromats ?? d.t2primeIsochromats,
    t2primeModel: o.t2primeModel ?? "auto",
  };
}

export function addSimulationOptions(c: Command): Command {
  return c
    .option("--seed <n>", "seed for every random choice (noise, perturbations); integer", intArg("--seed", 0, 2 ** 31 - 1), 1)
    .option("--density <n>", "isochromats per voxel along each in-plane axis (read, phase); 1–16", intArg("--density", 1, 16), 2)
    .option("--slice-isochromats <n>", "isochromats through the slice profile; 1–4096", intArg("--slice-isochromats", 1, 4096), 12)
    .option("--slice-extent <k>", "span of the through-slice isochromats, in slice thicknesses (covers the profile's skirts); 0.1–20", numArg("--slice-extent", 0.1, 20), 3)
    .addOption(new Option("--fat-model <model>", "fat spectrum: single (−3.4 ppm peak) or multi (six-peak)").choices(["single", "multi"]).default("multi"))
    .option(
      "--t2prime-isochromats <n>",
      "isochromats per voxel spreading off-resonance as a Lorentzian of width 1/(π·T2′), 1/T2′ = 1/T2* − 1/T2, so T2* decay " +
        "and spin-echo refocusing emerge; 1 = off (decay with T2 only); cost grows as n/density²; FID error ≲ 1/√n of M0; 1–1024",
      intArg("--t2prime-isochromats", 1, 1024),
      defaultIsochromatOptions().t2primeIsochromats,
    )
    .addOption(
      new Option(
        "--t2prime-model <model>",
        "how T2′ (T2* below T2) is modelled: spread (the isochromats of --t2prime-isochromats), closed-form (R2* = R2 + R2′ on every isochromat: " +
          "the spread's exact average, for an ideally spoiled gradient echo only) or auto (the closed form for a tissue whose spread would be off by more than 5 % at TE " +
          "in an ideally spoiled gradient echo, the spread otherwise; report.json isochromats.t2primeSpread[].model says which)",
      ).choices([...T2PRIME_MODELS]).default("auto"),
    )
    .addOption(new Option("--readout <operator>", "readout operator: auto (the cheaper of fast and direct by a cost predicted from the plan; report.json gives both predictions), fast (time segmentation, within --tolerance: with an exact FFT of the isochromat grid for ideally spoiled Cartesian gradient echo, and a fold of the readout groups per line for every other sequence; falls back to direct where it does not apply, and report.json says why) or direct (every isochromat at every sample)").choices(["auto", "fast", "direct"]).default("auto"))
    .option("--tolerance <rel>", "relative L2 error of k-space allowed to the fast readout operator (dimensionless); 1e-12–0.1", numArg("--tolerance", 1e-12, 0.1), 1e-6)
    .option("--workers <n>", "engine worker threads; default: the cores available; 1 keeps the whole run on one thread", intArg("--workers", 1, 256))
    .option("--shard <i/N>", "run only shard i of N (0 ≤ i < N) and write a partial k-space (partial.npy, partial.json) for `isofold merge`; shards split the direct readout's work (a fast or folded run computes the whole k-space in every shard: add --readout direct to split it)", shardArg)
    .option("--max-memory <GiB>", "refuse runs whose estimated memory exceeds this many GiB; default 80 % of the machine's memory", numArg("--max-memory", 0.001, 1e6))
    .option("-q, --quiet", "no progress line on stderr");
}

/** Parses --shard "i/N": 0 ≤ i < N. */
export function shardArg(v: string): [number, number] {
  const m = /^(\d+)\/(\d+)$/.exec(v.trim());
  const i = m ? Number(m[1]) : NaN, n = m ? Number(m[2]) : NaN;
  if (!m || !(n >= 1) || !(i < n) || n > 1e6) throw new InvalidArgumentError("--shard must be i/N with whole numbers 0 ≤ i < N, e.g. 0/4 … 3/4");
  return [i, n];
}

/** Engine options of a parsed simulating command. */
export function engineOptions(o: { workers?: number; shard?: [number, number]; maxMemory?: number; readout?: "auto" | "fast" | "direct"; tolerance?: number }) {
  return { workers: o.workers, shard: o.shard, maxMemory: o.maxMemory !== undefined ? o.maxMemory * 2 ** 30 : undefined, readout: o.readout, tolerance: o.tolerance };
}

