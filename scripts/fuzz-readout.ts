/**
 * `npm run fuzz-readout -- [seed] [cases]`: the fast readout operator against the direct one (the oracle) on
 * small random cases of every bundled protocol and phantom, through run() as the command line makes them
 * (files written to a temporary folder and removed). The draws cover the matrix, oversampling, partial Fourier
 * along phase and along read, several slices, the readout polarity, the slice orientation, its phase direction
 * and an oblique tilt (0–30 deg about read or phase), the isochromat options, the tolerance and the worker count.
 * Per case: the relative L2 error of kspace.npy, the a-posteriori estimate (largest over the case's engine runs)
 * and whether the two checks hold: the error within the tolerance, the estimate at or above it (a run the
 * estimate sent to the direct operator must be bitwise direct). About half the cases also run fast with the
 * other worker count (1 or 2) and must write the same kspace.npy bytes; about a third (one slice, small chunks
 * through ISOFOLD_CHUNK_ISOCHROMATS so that there are several blocks) run fast as 2 or 3 shards, merged as
 * `isofold merge` does (cli/merge.ts mergeParts): the merged kspace.npy must be the unsharded fast run's bytes
 * (the fast operator and the time-segmented fold compute the whole k-space in every shard, and block 0 carries
 * it; shards that fold are counted). Settings the protocol refuses
 * (timing, echo trains) are skipped with the reason. Exit 1 if a case fails. A development tool, not a test: the
 * suite's seeded property (test/engine-fast-estimate.test.ts) is its small, fixed version. Each case takes a few
 * seconds on 2 cores.
 */
import { mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { listPresets } from "../src/cli/inputs.js";
import { mergeParts } from "../src/cli/merge.js";
import { run } from "../src/cli/pipeline.js";
import { decodeNpy } from "../src/io/npy.js";
import { mulberry32 } from "../src/engine/fast.js";
import { UserError } from "../src/errors.js";

const ROOT = resolve(fileURLToPath(import.meta.url), "..", "..", "..");
const PRESETS = listPresets();
const PHANTOMS = readdirSync(join(ROOT, "phantoms")).filter((f) => f.endsWith(".json")).map((f) => f.replace(/\.json$/, "")).sort();
const IN_PLANE = { axial: ["x", "y"], coronal: ["x", "z"], sagittal: ["y", "z"] } as const;

function complexKspace(dir: string): { re: Float64Array; im: Float64Array } {
  const a = decodeNpy(readFileSync(join(dir, "kspace.npy")), "kspace.npy");
  if (a.dtype !== "complex128" && a.dtype !== "complex64") throw new Error(`kspace.npy: expected complex data, got ${a.dtype}`);
  return a.data;
}

const sameBytes = (a: string, b: string): boolean => readFileSync(join(a, "kspace.npy")).equals(readFileSync(join(b, "kspace.npy")));

type Readout = { operator: string; method?: string; fallback?: string; estimate?: { relL2: number } };
const readouts = (report: Record<string, unknown>): Readout[] => {
  const ro = (report["engine"] as { readout: unknown }).readout;
  return (Array.isArray(ro) ? ro : [ro]) as Readout[];
};

async function main(): Promise<void> {
  const seed = Number(process.argv[2] ?? 1), cases = Number(process.argv[3] ?? 20);
  if (!Number.isInteger(seed) || !Number.isInteger(cases) || cases < 1) {
    process.stderr.write("fuzz-readout: give a whole-number seed and a case count, e.g. npm run fuzz-readout -- 7 40\n");
    process.exit(2);
  }
  const rnd = mulberry32(seed);
  const pick = <T>(a: readonly T[]): T => a[Math.floor(rnd() * a.length)]!;
  const tmp = mkdtempSync(join(tmpdir(), "isofold-fuzz-"));
  const chunkEnv = process.env["ISOFOLD_CHUNK_ISOCHROMATS"];
  let ok = 0, bad = 0, skipped = 0, workerChecks = 0, shardChecks = 0, shardsFolded = 0;
  let worstErr = 0, worstEst = Infinity;
  try {
    for (let k = 0; k < cases; k++) {
      const preset = pick(PRESETS), phantom = pick(PHANTOMS), m = pick([12, 16, 20, 24, 32]);
      const sets = [`matrix.read=${m}`, `matrix.phase=${pick([m, m - 4])}`];
      // shards split one engine run: one slice (a multi-slice run is refused)
      const shards = rnd() < 0.35 ? pick([2, 3]) : 0;
      if (rnd() < 0.3) sets.push(`oversampling.phase=${pick([0, 0.25, 0.5])}`);
      if (rnd() < 0.3) sets.push(`oversampling.read=${pick([1, 2])}`);
      if (rnd() < 0.3 && !preset.startsWith("gre3d")) sets.push(`partialFourier.phase=${pick([0.75, 0.625])}`);
      if (rnd() < 0.3) sets.push(`partialFourier.read=${pick([0.75, 0.625])}`);
      if (shards > 0) sets.push("slices.count=1");
      else if (rnd() < 0.3 && !preset.startsWith("gre3d")) sets.push(`slices.count=${pick([1, 2, 3])}`);
      if (preset.startsWith("gre3d")) sets.push(`matrix.slice=${pick([4, 6])}`);
      if (preset.startsWith("rare")) sets.push(`echoTrainLength=${pick([2, 4])}`);
      if (rnd() < 0.3) sets.push("readoutPolarity=negative");
      if (rnd() < 0.4) {
        const orientation = pick(["axial", "coronal", "sagittal"] as const);
        sets.push(`slice.orientation=${orientation}`, `phaseDirection=${pick(IN_PLANE[orientation])}`);
      }
      if (rnd() < 0.5) sets.push(`slice.angle=${(rnd() * 30).toFixed(1)} deg`, `slice.tiltAxis=${pick(["read", "phase"])}`);
      const tolerance = pick([1e-4, 1e-6]);
      const iso = { density: pick([1, 2]), sliceCount: pick([2, 3, 5]), sliceExtent: 3, fatModel: pick(["multi", "single"] as const), t2primeIsochromats: pick([1, 2, 4]), offsetHz: 0 };
      const workers = pick([1, 2]);
      const otherWorkers = shards > 0 || rnd() < 0.5;
      const chunk = shards > 0 ? pick([64, 256]) : undefined;
      const tag = `${k} ${preset} ${phantom} ${sets.join(" ")} density ${iso.density}, ${iso.sliceCount} through-slice, T2′ ${iso.t2primeIsochromats}, fat ${iso.fatModel}, tolerance ${tolerance}, ${workers} worker(s)` +
        (otherWorkers ? ` (and ${3 - workers})` : "") + (shards > 0 ? `, ${shards} shards of chunks of ${chunk}` : "");
      const base = {
        phantom: join(ROOT, "phantoms", `${phantom}.json`), protocol: preset, sets, seed: 1, quiet: true, iso, workers,
        keepWarnings: true, tolerance, convergenceCheck: false,
      };
      const dirs = { fast: join(tmp, `f${k}`), direct: join(tmp, `d${k}`), other: join(tmp, `w${k}`), merged: join(tmp, `m${k}`) };
      const parts = Array.from({ length: shards }, (_, i) => join(tmp, `s${k}-${i}`));
      if (chunk === undefined) delete process.env["ISOFOLD_CHUNK_ISOCHROMATS"];
      else process.env["ISOFOLD_CHUNK_ISOCHROMATS"] = String(chunk);
      let fast: Awaited<ReturnType<typeof run>>;
      const shardReports: Readout[] = [];
      let totalBlocks = 0;
      try {
        fast = await run({ ...base, out: dirs.fast, readout: "fast" });
        await run({ ...base, out: dirs.direct, readout: "direct" });
        if (otherWorkers) await run({ ...base, workers: 3 - workers, out: dirs.other, readout: "fast" });
        for (let i = 0; i < shards; i++) {
          await run({ ...base, workers: pick([1, 2]), out: parts[i]!, readout: "fast", shard: [i, shards] });
          const meta = JSON.parse(readFileSync(join(parts[i]!, "partial.json"), "utf8")) as { totalBlocks: number; engine: { readout: Readout } };
          shardReports.push(meta.engine.readout);
          totalBlocks = meta.totalBlocks;
        }
        if (shards > 0) await mergeParts([...parts].reverse(), dirs.merged);
      } catch (e) {
        if (!(e instanceof UserError)) throw e;
        skipped++;
        console.log(`skip ${tag}: ${e.message}`);
        continue;
      }
      const a = complexKspace(dirs.fast), b = complexKspace(dirs.direct);
      let num = 0, den = 0;
      for (let i = 0; i < a.re.length; i++) {
        num += (a.re[i]! - b.re[i]!) ** 2 + (a.im[i]! - b.im[i]!) ** 2;
        den += b.re[i]! ** 2 + b.im[i]! ** 2;
      }
      const err = den > 0 ? Math.sqrt(num / den) : 0;
      const reports = readouts(fast.report);
      const est = Math.max(...reports.map((r) => r.estimate?.relL2 ?? 0));
      const allDirect = reports.every((r) => r.operator === "direct");
      const why: string[] = [];
      if (!(err < tolerance)) why.push("error above the tolerance");
      if (allDirect ? err !== 0 : !(est >= err)) why.push(allDirect ? "direct operator but not bitwise direct" : "estimate below the error");
      if (!allDirect) {
        worstErr = Math.max(worstErr, err / tolerance);
        if (err > 0) worstEst = Math.min(worstEst, est / err);
      }
      if (otherWorkers) {
        workerChecks++;
        if (!sameBytes(dirs.fast, dirs.other)) why.push(`${3 - workers} worker(s) wrote other bytes`);
      }
      let shardNote = "";
      if (shards > 0) {
        shardChecks++;
        shardNote = `, ${totalBlocks} block${totalBlocks === 1 ? "" : "s"} in ${shards} shards`;
        // the fast operator and the fold finish the whole k-space in every shard; block 0 carries it
        if (shardReports.some((r) => /time-segmented fold/.test(r.method ?? ""))) {
          shardsFolded++;
          shardNote += " (folded)";
        }
        if (!sameBytes(dirs.merged, dirs.fast)) why.push(`${shards} shards merged wrote other bytes than the unsharded fast run`);
      }
      const good = why.length === 0;
      if (good) ok++;
      else bad++;
      console.log(`${good ? "ok  " : "FAIL"} error ${err.toExponential(2)}, estimate ${est.toExponential(2)}, ${reports.map((r) => r.operator).join(",")}${shardNote}${good ? "" : ` (${why.join("; ")})`}: ${tag}`);
      for (const d of [...Object.values(dirs), ...parts]) rmSync(d, { recursive: true, force: true });
    }
  } finally {
    if (chunkEnv === undefined) delete process.env["ISOFOLD_CHUNK_ISOCHROMATS"];
    else process.env["ISOFOLD_CHUNK_ISOCHROMATS"] = chunkEnv;
    rmSync(tmp, { recursive: true, force: true });
  }
  console.log(`${ok} ok, ${bad} failed, ${skipped} skipped (seed ${seed}); ${workerChecks} worker-count and ${shardChecks} shard checks` +
    ` (${shardsFolded} of them folded); largest error/tolerance ${worstErr.toExponential(2)}, smallest estimate/error ${worstEst.toExponential(2)}`);
  process.exit(bad > 0 ? 1 : 0);
}

await main();
