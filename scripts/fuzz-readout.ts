/**
 * `npm run fuzz-readout -- [seed] [cases]`: the fast readout operator against the direct one (the oracle) on
 * small random cases of every bundled protocol and phantom, through run() as the command line makes them
 * (files written to a temporary folder and removed). Per case: the relative L2 error of kspace.npy, the
 * a-posteriori estimate (largest over the case's engine runs) and whether the two checks hold: the error within
 * the tolerance, the estimate at or above it (a run the estimate sent to the direct operator must be bitwise
 * direct). Settings the protocol refuses (timing, echo trains) are skipped with the reason. Exit 1 if a case
 * fails. A development tool, not a test: the suite's seeded property (test/engine-fast-estimate.test.ts) is its
 * small, fixed version. Each case takes a few seconds on 2 cores.
 */
import { mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { listPresets } from "../src/cli/inputs.js";
import { run } from "../src/cli/pipeline.js";
import { decodeNpy } from "../src/io/npy.js";
import { mulberry32 } from "../src/engine/fast.js";
import { UserError } from "../src/errors.js";

const ROOT = resolve(fileURLToPath(import.meta.url), "..", "..", "..");
const PRESETS = listPresets();
const PHANTOMS = readdirSync(join(ROOT, "phantoms")).filter((f) => f.endsWith(".json")).map((f) => f.replace(/\.json$/, "")).sort();

function complexKspace(dir: string): { re: Float64Array; im: Float64Array } {
  const a = decodeNpy(readFileSync(join(dir, "kspace.npy")), "kspace.npy");
  if (a.dtype !== "complex128" && a.dtype !== "complex64") throw new Error(`kspace.npy: expected complex data, got ${a.dtype}`);
  return a.data;
}

async function main(): Promise<void> {
  const seed = Number(process.argv[2] ?? 1), cases = Number(process.argv[3] ?? 20);
  if (!Number.isInteger(seed) || !Number.isInteger(cases) || cases < 1) {
    process.stderr.write("fuzz-readout: give a whole-number seed and a case count, e.g. npm run fuzz-readout -- 7 40\n");
    process.exit(2);
  }
  const rnd = mulberry32(seed);
  const pick = <T>(a: readonly T[]): T => a[Math.floor(rnd() * a.length)]!;
  const tmp = mkdtempSync(join(tmpdir(), "isofold-fuzz-"));
  let ok = 0, bad = 0, skipped = 0;
  try {
    for (let k = 0; k < cases; k++) {
      const preset = pick(PRESETS), phantom = pick(PHANTOMS), m = pick([12, 16, 20, 24]);
      const sets = [`matrix.read=${m}`, `matrix.phase=${pick([m, m - 4])}`];
      if (rnd() < 0.3) sets.push(`oversampling.phase=${pick([0, 0.25, 0.5])}`);
      if (rnd() < 0.3) sets.push(`oversampling.read=${pick([1, 2])}`);
      if (rnd() < 0.3 && !preset.startsWith("gre3d")) sets.push(`partialFourier.phase=${pick([0.75, 0.625])}`);
      if (rnd() < 0.3 && !preset.startsWith("gre3d")) sets.push(`slices.count=${pick([1, 2, 3])}`);
      if (preset.startsWith("gre3d")) sets.push(`matrix.slice=${pick([4, 6])}`);
      if (preset.startsWith("rare")) sets.push(`echoTrainLength=${pick([2, 4])}`);
      if (rnd() < 0.3) sets.push("readoutPolarity=negative");
      const tolerance = pick([1e-4, 1e-6]);
      const iso = { density: pick([1, 2]), sliceCount: pick([2, 3, 5]), sliceExtent: 3, fatModel: pick(["multi", "single"] as const), t2primeIsochromats: pick([1, 2, 4]), offsetHz: 0 };
      const workers = pick([1, 2]);
      const tag = `${k} ${preset} ${phantom} ${sets.join(" ")} density ${iso.density}, ${iso.sliceCount} through-slice, T2′ ${iso.t2primeIsochromats}, fat ${iso.fatModel}, tolerance ${tolerance}, ${workers} worker(s)`;
      const base = {
        phantom: join(ROOT, "phantoms", `${phantom}.json`), protocol: preset, sets, seed: 1, quiet: true, iso, workers,
        keepWarnings: true, tolerance, convergenceCheck: false,
      };
      let fast: Awaited<ReturnType<typeof run>>;
      try {
        fast = await run({ ...base, out: join(tmp, `f${k}`), readout: "fast" });
        await run({ ...base, out: join(tmp, `d${k}`), readout: "direct" });
      } catch (e) {
        if (!(e instanceof UserError)) throw e;
        skipped++;
        console.log(`skip ${tag}: ${e.message}`);
        continue;
      }
      const a = complexKspace(join(tmp, `f${k}`)), b = complexKspace(join(tmp, `d${k}`));
      let num = 0, den = 0;
      for (let i = 0; i < a.re.length; i++) {
        num += (a.re[i]! - b.re[i]!) ** 2 + (a.im[i]! - b.im[i]!) ** 2;
        den += b.re[i]! ** 2 + b.im[i]! ** 2;
      }
      const err = den > 0 ? Math.sqrt(num / den) : 0;
      const ro = (fast.report["engine"] as { readout: unknown }).readout;
      const reports = (Array.isArray(ro) ? ro : [ro]) as { operator: string; estimate?: { relL2: number } }[];
      const est = Math.max(...reports.map((r) => r.estimate?.relL2 ?? 0));
      const allDirect = reports.every((r) => r.operator === "direct");
      const good = err < tolerance && (allDirect ? err === 0 : est >= err);
      if (good) ok++;
      else bad++;
      console.log(`${good ? "ok  " : "FAIL"} error ${err.toExponential(2)}, estimate ${est.toExponential(2)}, ${reports.map((r) => r.operator).join(",")}: ${tag}`);
      rmSync(join(tmp, `f${k}`), { recursive: true, force: true });
      rmSync(join(tmp, `d${k}`), { recursive: true, force: true });
    }
  } finally {
    rmSync(tmp, { recursive: true, force: true });
  }
  console.log(`${ok} ok, ${bad} failed, ${skipped} skipped (seed ${seed})`);
  process.exit(bad > 0 ? 1 : 0);
}

await main();
