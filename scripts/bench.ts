/**
 * `npm run bench`: engine throughput and end-to-end times, as a table on
 * stdout. Kernels: the readout recurrence (iso-samples/s) on 65,536 groups ×
 * 256 samples × LINES lines, and the RF map of a 200-step sinc (iso-steps/s)
 * on 65,536 isochromats of distinct frequency, on 1 thread and on 2 worker
 * threads. End to end: `run()` of 2D GRE on the torso phantom at 128² and
 * 256², 1 and 4 isochromats per voxel (density 1 and 2, one through-slice
 * isochromat), 1 and 2 workers, each in a fresh process (peak RSS from
 * resourceUsage().maxRSS); and the target case, 256², density 2, 16
 * through-slice isochromats, 2 workers. Medians of several runs. Then the
 * fast readout operator against the direct one: the 128² demo in-process
 * after warm-up (default and preview quality), the 256² torso gre-t1-3t with
 * default options (time, peak RSS; the direct case once) and the throughput
 * of the 256² disc: the whole run() in a fresh process (module loading
 * excluded) and the same run() in-process after warm-up runs, the same
 * whole run on the fewest isochromats (what a run costs whatever its
 * isochromat count), and the engine alone.
 * Dataset rows (issue 13 targets): one 128² torso dataset case (gre-t1-3t,
 * default options, 2 workers) with 1 coil and with 8 coils, each through the
 * CLI in a fresh process, and the cases per hour of a 1000-case 128²
 * eight-coil batch on 2 cores, estimated from a short batch
 * (BENCH_DATASET_CASES cases, default 3, with seeded perturbations), and a
 * two-case batch with B0 varying per case (--vary b0: Δf interpolated);
 * BENCH_ONLY=dataset for these rows alone, BENCH_DATASET=0 to skip them.
 * Environment: BENCH_RUNS (end-to-end repeats, default 3), BENCH_TARGET=0 to
 * skip the target cases, BENCH_ONLY=fast for the fast-operator rows alone
 * (BENCH_ONLY=disc for the two disc rows alone),
 * BENCH_DIRECT=0 to skip the 256² direct run, BENCH_DISC=0 to skip the disc
 * throughput row, BENCH_TORSO_READOUT=auto|fast|direct for the 256² torso's
 * operator (default auto, the default of the CLI). Benchmarks are never tests.
 * Fold rows (BENCH_ONLY=fold): the time-segmented fold of the readout
 * (engine/fold.ts) against the direct operator, one in-process run each
 * (serial, after a warm-up at 32²), on a 128² spin echo and a 64² single-shot
 * EPI of the two-bottle phantom with a B0 expression (varying through the
 * slice too, so readout groups = isochromats) and the T2′ spread;
 * BENCH_FOLD_ROW=<text> keeps the rows whose label contains it.
 * Preset rows (BENCH_ONLY=presets, BENCH_PRESETS=0 to skip): every bundled
 * preset on the torso through the command line with its own defaults, as a
 * new user runs it (whole process, peak RSS, readout operator or refusal).
 */
import { spawnSync } from "node:child_process";
import { mkdtempSync, readdirSync, rmSync } from "node:fs";
import { tmpdir, availableParallelism, cpus } from "node:os";
import { dirname, join } from "node:path";
import { readFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { isMainThread, parentPort, Worker, workerData } from "node:worker_threads";
import { GAMMA } from "../src/constants.js";
import { readoutRecurrenceFast, rfAffineMany, wasmKernel } from "../src/engine/wasm.js";
import type { Executor } from "../src/engine/executor.js";
import type { IsochromatCells, IsochromatSet } from "../src/isochromats/index.js";
import type { Sequence } from "../src/sequence/index.js";

const GROUPS = 65536, SAMPLES = 256, LINES = 16;
const RF_ISO = 65536, RF_STEPS = 200;
const SELF = fileURLToPath(import.meta.url);

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  return s.length % 2 ? s[(s.length - 1) / 2]! : (s[s.length / 2 - 1]! + s[s.length / 2]!) / 2;
}

/** Readout inputs for groups g0 … g1−1 (deterministic). */
function readoutInputs(g0: number, g1: number) {
  const n = g1 - g0;
  const zr = new Float64Array(n), zi = new Float64Array(n), ar = new Float64Array(n), ai = new Float64Array(n);
  for (let k = 0; k < n; k++) {
    const g = g0 + k;
    zr[k] = Math.cos(g * 0.37);
    zi[k] = Math.sin(g * 0.11);
    const th = (2 * Math.PI * ((g * 0.618034) % 1)) - Math.PI, r = Math.exp(-1e-4 * (g % 97));
    ar[k] = r * Math.cos(th);
    ai[k] = r * Math.sin(th);
  }
  return { zr, zi, ar, ai, n };
}

/** Runs LINES readouts over the given groups; returns seconds. */
function readoutRun(kind: "scalar" | "wasm", g0: number, g1: number): number {
  const { zr, zi, ar, ai, n } = readoutInputs(g0, g1);
  const sr = new Float64Array(SAMPLES), si = new Float64Array(SAMPLES);
  // "scalar": the TypeScript twin the engine runs with WASM off (same bits as the kernel)
  const f = (sr: Float64Array, si: Float64Array, ns: number, zr: Float64Array, zi: Float64Array, ar: Float64Array, ai: Float64Array, g: number) =>
    readoutRecurrenceFast(sr, si, ns, zr, zi, ar, ai, g, kind === "wasm");
  f(sr, si, SAMPLES, zr, zi, ar, ai, Math.min(n, 1024)); // warm-up
  const t = performance.now();
  for (let l = 0; l < LINES; l++) f(sr, si, SAMPLES, zr, zi, ar, ai, n);
  return (performance.now() - t) / 1000;
}

function sinc(): { re: Float64Array; im: Float64Array; dt: number } {
  const re = new Float64Array(RF_STEPS), im = new Float64Array(RF_STEPS), dt = 1e-5;
  for (let s = 0; s < RF_STEPS; s++) {
    const x = ((s - RF_STEPS / 2 + 0.5) / (RF_STEPS / 8)) * Math.PI;
    const hann = 0.5 + 0.5 * Math.cos((Math.PI * (s - RF_STEPS / 2 + 0.5)) / (RF_STEPS / 2));
    re[s] = 2e-5 * hann * Math.sin(x) / x;
  }
  return { re, im, dt };
}

/** RF maps for isochromats i0 … i1−1, each at its own offset (−5 … 5 kHz); returns seconds. */
function rfRun(kind: "scalar" | "wasm", i0: number, i1: number): number {
  const { re, im, dt } = sinc();
  const n = i1 - i0, out = new Float64Array(n * 12);
  const f = new Float64Array(n), r1 = new Float64Array(n).fill(1), r2 = new Float64Array(n).fill(10);
  for (let i = i0; i < i1; i++) f[i - i0] = -5000 + (10000 * i) / RF_ISO;
  rfAffineMany(out, 0, Math.min(n, 256), f, r1, r2, re, im, dt, GAMMA, kind === "wasm"); // warm-up
  const t = performance.now();
  rfAffineMany(out, 0, n, f, r1, r2, re, im, dt, GAMMA, kind === "wasm"); // "scalar": the TypeScript twin (WASM off)
  return (performance.now() - t) / 1000;
}

type Job = { kind: "readout-scalar" | "readout-wasm" | "rf-scalar" | "rf-wasm"; a: number; b: number };

function runJob(j: Job): number {
  if (j.kind === "rf-scalar" || j.kind === "rf-wasm") return rfRun(j.kind === "rf-wasm" ? "wasm" : "scalar", j.a, j.b);
  return readoutRun(j.kind === "readout-wasm" ? "wasm" : "scalar", j.a, j.b);
}

/** Wall time of the job split in two halves on two workers (started together). */
async function twoWorkers(kind: Job["kind"], total: number): Promise<number> {
  const half = total / 2;
  const ws = [0, 1].map((k) => new Worker(SELF, { workerData: { kind, a: k * half, b: (k + 1) * half } satisfies Job }));
  await Promise.all(ws.map((w) => new Promise((r) => w.once("message", r)))); // ready
  const t = performance.now();
  ws.forEach((w) => w.postMessage("go"));
  await Promise.all(ws.map((w) => new Promise((r) => w.once("message", r))));
  const s = (performance.now() - t) / 1000;
  await Promise.all(ws.map((w) => w.terminate()));
  return s;
}

interface E2E {
  phantom: string; protocol: string; matrix: number; density: number; slice: number; workers: number;
  /** Readout operator (default fast) and T2′ spread size (default 1 = none). */
  readout?: "auto" | "fast" | "direct"; t2prime?: number;
}

/** The run() options of an end-to-end case writing to `out`. */
function e2eOptions(c: E2E, out: string) {
  return {
    phantom: c.phantom, protocol: c.protocol, sets: [`matrix.read=${c.matrix}`, `matrix.phase=${c.matrix}`], out, seed: 1, quiet: true,
    // no T2′ spread: the engine target counts 2×2 in-plane × 16 through-slice isochromats per voxel
    iso: { density: c.density, sliceCount: c.slice, sliceExtent: 3, fatModel: "multi" as const, t2primeIsochromats: c.t2prime ?? 1, offsetHz: 0 }, workers: c.workers,
    readout: c.readout ?? "fast",
  };
}

/** Child mode: one run() in this fresh process; prints JSON. */
async function e2eChild(c: E2E): Promise<void> {
  const { run } = await import("../src/cli/pipeline.js");
  const out = mkdtempSync(join(tmpdir(), "isofold-bench-"));
  try {
    const t = performance.now();
    const r = await run(e2eOptions(c, out));
    const seconds = (performance.now() - t) / 1000;
    const iso = (r.report["isochromats"] as { count: number; columns: number }).count;
    const columns = (r.report["isochromats"] as { count: number; columns: number }).columns;
    const readout = (r.report["engine"] as { readout: unknown }).readout;
    const seq = r.report["sequence"] as { derived?: Record<string, unknown> };
    void seq;
    process.stdout.write(JSON.stringify({ seconds, iso, columns, readout, maxRssKiB: process.resourceUsage().maxRSS }) + "\n");
  } finally {
    rmSync(out, { recursive: true, force: true });
  }
}

function e2e(c: E2E, runs: number): { seconds: number; iso: number; columns: number; readout: unknown; maxRssMiB: number; runs: number } {
  const ts: number[] = [];
  let iso = 0, rss = 0, columns = 0;
  let readout: unknown = null;
  for (let k = 0; k < runs; k++) {
    const r = spawnSync(process.execPath, [SELF, "--e2e", JSON.stringify(c)], { encoding: "utf8", maxBuffer: 1 << 24 });
    if (r.status !== 0) throw new Error(`bench case failed: ${r.stderr}`);
    const j = JSON.parse(r.stdout.trim().split("\n").pop()!) as { seconds: number; iso: number; columns: number; readout: unknown; maxRssKiB: number };
    ts.push(j.seconds);
    iso = j.iso;
    columns = j.columns;
    readout = j.readout;
    rss = Math.max(rss, j.maxRssKiB / 1024);
  }
  return { seconds: median(ts), iso, columns, readout, maxRssMiB: rss, runs };
}

/** One line about a run's readout operator (report.json engine.readout). */
function readoutNote(r: unknown): string {
  const o = r as { operator?: string; segments?: number; lineRank?: number; estimate?: { relL2: number; measured?: number }; fallback?: string; requested?: string; predicted?: { directMs: number; fastMs: number | null } } | null;
  if (!o) return "";
  // where the time-segmented fold's prediction decided (the spoiled operator did not apply), its numbers
  const fp = (o as { foldPredicted?: { directMs: number; fastMs: number | null } }).foldPredicted;
  const pr = o.operator === "direct" && fp ? fp : o.predicted;
  const auto = o.requested === "auto" && pr ? `auto chose ${o.operator} (predicted direct ${pr.directMs.toFixed(0)} ms, ${pr === fp ? "fold" : "fast"} ${pr.fastMs === null ? "n/a" : `${pr.fastMs.toFixed(0)} ms`}); ` : "";
  if (o.operator !== "fast") return `${auto}${o.operator ?? "?"}${o.fallback ? ` (${o.fallback})` : ""}`;
  const ip = (o as { b0Interpolation?: { nodes: number; stepHz: number; maxRelError: number } }).b0Interpolation;
  const interp = ip ? `, Δf interpolated (${ip.nodes.toLocaleString("en")} nodes ${ip.stepHz.toFixed(1)} Hz apart, probes ${ip.maxRelError.toExponential(1)})` : "";
  const method = (o as { method?: string }).method ?? "";
  const how = /time-segmented fold/.test(method) ? "fold" : `rank ${o.lineRank}`;
  const measured = o.estimate?.measured !== undefined && o.estimate.measured !== o.estimate.relL2 ? ` (measured ${o.estimate.measured.toExponential(1)}, below the floor)` : "";
  return `${auto}fast, L ${o.segments}, ${how}, estimate ${o.estimate?.relL2.toExponential(1)}${measured}${interp}`;
}

/**
 * In-process engine time of the 128² two-bottle demo (gre-demo-1.5t) after a
 * warm-up run: prepare() outside the timing, then the engine alone
 * (simulateCells on the serial executor, as simulate() runs a slice: no
 * process start-up, no worker spawn); median of `runs`.
 */
async function demoInProcess(iso: { density: number; sliceCount: number; t2primeIsochromats: number }, readout: "auto" | "fast" | "direct", runs: number): Promise<{ ms: number; iso: number; note: string }> {
  const { prepare } = await import("../src/cli/pipeline.js");
  const { serialExecutor } = await import("../src/engine/index.js");
  const out = mkdtempSync(join(tmpdir(), "isofold-bench-"));
  try {
    const p = prepare({
      phantom: "phantoms/two-bottle.json", protocol: "gre-demo-1.5t", sets: [], out, seed: 1,
      iso: { ...iso, sliceExtent: 3, fatModel: "multi", offsetHz: 0 }, workers: 1,
    });
    // as simulate() runs a slice: the fast operator streams its weights from the cells, the direct one
    // uses the stored isochromats (made on first use, during the warm-up)
    return await timedEngine(p, serialExecutor(), readout, runs);
  } finally {
    rmSync(out, { recursive: true, force: true });
  }
}

/**
 * The same whole run() as an end-to-end case, in this process after warm-up
 * runs (module loading, V8's compilation and the kept helper threads out of
 * the timing, as in the demo rows): median seconds of `runs`, each into a
 * fresh folder.
 */
async function e2eInProcess(c: E2E, runs: number): Promise<{ seconds: number; iso: number; readout: unknown }> {
  const { run } = await import("../src/cli/pipeline.js");
  const tmp = mkdtempSync(join(tmpdir(), "isofold-bench-"));
  try {
    let iso = 0, readout: unknown = null;
    const once = async (k: number) => {
      const out = join(tmp, `run-${k}`);
      const t = performance.now();
      const r = await run({ ...e2eOptions(c, out), keepWarnings: true });
      const s = (performance.now() - t) / 1000;
      iso = (r.report["isochromats"] as { count: number }).count;
      readout = (r.report["engine"] as { readout: unknown }).readout;
      rmSync(out, { recursive: true, force: true });
      return s;
    };
    for (let k = 0; k < 3; k++) await once(k); // warm-up
    const ts: number[] = [];
    for (let k = 0; k < runs; k++) ts.push(await once(3 + k));
    return { seconds: median(ts), iso, readout };
  } finally {
    rmSync(tmp, { recursive: true, force: true });
  }
}

/** Runs of the warm in-process disc row (a run takes 0.2–1 s). */
const DISC_WARM_RUNS = 7;

/** Runs per demo row: a run takes 0.1–0.8 s, and medians of 5 swung by ±25 % on a shared 2-core machine. */
const DEMO_RUNS = 15;

/** The fast readout operator against the direct one (issue targets: ratios in one run). */
async function fastRows(runs: number): Promise<void> {
  console.log("");
  console.log("| fast readout operator | isochromats | fast | direct | ratio | readout |");
  console.log("| --- | --- | --- | --- | --- | --- |");
  // auto (the default) against both: the same process, the same warm-up, medians of `runs`
  const autoRows: string[] = [];
  // 128² demo, in-process after warm-up: default quality and preview quality
  for (const [label, q] of [
    ["default quality (density 2, 12 through-slice, T2′ spread 16)", { density: 2, sliceCount: 12, t2primeIsochromats: 16 }],
    ["preview quality (density 1, 3 through-slice, no T2′ spread)", { density: 1, sliceCount: 3, t2primeIsochromats: 1 }],
  ] as const) {
    const f = await demoInProcess(q, "fast", DEMO_RUNS);
    const d = await demoInProcess(q, "direct", DEMO_RUNS);
    const a = await demoInProcess(q, "auto", DEMO_RUNS);
    console.log(`| 128² two-bottle demo, engine in-process after warm-up, ${label} | ${f.iso.toLocaleString("en")} | ${f.ms.toFixed(0)} ms | ${d.ms.toFixed(0)} ms | ${(d.ms / f.ms).toFixed(1)}× | ${f.note} |`);
    autoRows.push(`| 128² two-bottle demo, ${label} | ${a.ms.toFixed(0)} ms | ${f.ms.toFixed(0)} ms | ${d.ms.toFixed(0)} ms | ${(Math.min(f.ms, d.ms) / a.ms).toFixed(2)} | ${a.note} |`);
  }
  // 256² torso gre-t1-3t, default options, fresh processes, 2 workers (the direct case once: ~80 s)
  const torso: E2E = { phantom: "phantoms/torso-slice.json", protocol: "gre-t1-3t", matrix: 256, density: 2, slice: 12, t2prime: 16, workers: 2 };
  // auto (the default) runs here: it reports its choice and both predictions (run once; the fast row when it picks fast)
  const tf = e2e({ ...torso, readout: (process.env["BENCH_TORSO_READOUT"] as E2E["readout"]) ?? "auto" }, 1);
  const td = process.env["BENCH_DIRECT"] === "0" ? null : e2e({ ...torso, readout: "direct" }, 1);
  console.log(
    `| 256² torso gre-t1-3t, default options, whole run (fresh process, 2 workers) | ${tf.iso.toLocaleString("en")} | ${tf.seconds.toFixed(1)} s, ${tf.maxRssMiB.toFixed(0)} MiB | ` +
      `${td ? `${td.seconds.toFixed(1)} s, ${td.maxRssMiB.toFixed(0)} MiB` : "skipped (BENCH_DIRECT=0)"} | ${td ? `${(td.seconds / tf.seconds).toFixed(1)}× time, ${(td.maxRssMiB / tf.maxRssMiB).toFixed(1)}× memory` : "—"} | ${readoutNote(tf.readout)} |`,
  );
  console.log("");
  console.log("| readout auto (default) | auto | fast | direct | best of fast, direct ÷ auto (1 = auto chose the faster) | choice |");
  console.log("| --- | --- | --- | --- | --- | --- |");
  for (const r of autoRows) console.log(r);
  if (process.env["BENCH_DISC"] === "0") return;
  await discRows(runs, false);
}

/** Whole-simulation throughput of the 256² disc (in a fresh process, and warm in-process); `header` prints the table head (BENCH_ONLY=disc). */
async function discRows(runs: number, header: boolean): Promise<void> {
  if (header) {
    console.log("");
    console.log("| fast readout operator | isochromats | fast | direct | ratio | readout |");
    console.log("| --- | --- | --- | --- | --- | --- |");
  }
  // throughput: in-plane isochromats × readout samples / wall time
  const disc: E2E = { phantom: "phantoms/disc.json", protocol: "gre-t1-3t", matrix: 256, density: 2, slice: 16, workers: 2 };
  const df = e2e({ ...disc, readout: "fast" }, runs);
  const samples = 256 * 512; // 256 lines × 512 samples (read oversampling 2)
  const inPlane = df.iso / 16;
  console.log(
    `| 256² disc GRE, 2×2 in-plane × 16 through-slice, whole run() in a fresh process (from the call: module loading excluded; median of ${runs}; 2 workers), throughput = in-plane isochromats × readout samples / wall time | ${df.iso.toLocaleString("en")} (${Math.round(inPlane).toLocaleString("en")} in-plane) | ` +
      `${df.seconds.toFixed(2)} s: ${g((inPlane * samples) / df.seconds)} iso-samples/s (all isochromats: ${g((df.iso * samples) / df.seconds)}) | — | — | ${readoutNote(df.readout)} |`,
  );
  // the same whole run() in-process after 3 warm-up runs (no process start, module loading or compilation)
  const dw = await e2eInProcess({ ...disc, readout: "fast" }, DISC_WARM_RUNS);
  console.log(
    `| 256² disc GRE, the same whole run() in-process, warm (after 3 runs in this process; median of ${DISC_WARM_RUNS}), throughput as above | ${dw.iso.toLocaleString("en")} (${Math.round(dw.iso / 16).toLocaleString("en")} in-plane) | ` +
      `${dw.seconds.toFixed(2)} s: ${g(((dw.iso / 16) * samples) / dw.seconds)} iso-samples/s (all isochromats: ${g((dw.iso * samples) / dw.seconds)}) | — | — | ${readoutNote(dw.readout)} |`,
  );
  // the same whole run() on the fewest isochromats (density 1, 2 through-slice): what a run costs whatever its
  // isochromat count (files, report, page, checks, reconstruction, the operator's grid), fresh and warm
  const tiny: E2E = { ...disc, density: 1, slice: 2, readout: "fast" };
  const beyond = (full: number, fewest: number) => (full > fewest ? `${g(((df.iso / 16) * samples) / (full - fewest))} iso-samples/s` : "— (no difference)");
  const tf = e2e(tiny, runs), tw = await e2eInProcess(tiny, DISC_WARM_RUNS);
  console.log(
    `| 256² disc GRE, the same whole run() on 1×1 in-plane × 2 through-slice isochromats (the part of a run that does not grow with its isochromats), fresh process (median of ${runs}) and warm in-process (median of ${DISC_WARM_RUNS}) | ${tf.iso.toLocaleString("en")} | ` +
      `fresh ${tf.seconds.toFixed(2)} s (${((100 * tf.seconds) / df.seconds).toFixed(0)} % of the 2×2 × 16 run's), warm ${tw.seconds.toFixed(2)} s (${((100 * tw.seconds) / dw.seconds).toFixed(0)} %); ` +
      `the 2×2 × 16 run's throughput on the time beyond it (in-plane isochromats × samples / (full − fewest); a difference of two medians, so rough): ` +
      `fresh ${beyond(df.seconds, tf.seconds)}, warm ${beyond(dw.seconds, tw.seconds)} | — | — | ${readoutNote(tw.readout)} |`,
  );
  // the engine alone, as run() calls it (no checks, reconstruction, measurements or files): in-process after warm-up
  const de = await discEngineInProcess(disc, DISC_WARM_RUNS);
  console.log(
    `| 256² disc GRE, the engine alone in-process (simulateCells on 2 threads as run() calls it: no checks, reconstruction, measurements or files; after 3 warm-up runs; median of ${DISC_WARM_RUNS}), throughput as above | ${de.iso.toLocaleString("en")} (${Math.round(de.iso / 16).toLocaleString("en")} in-plane) | ` +
      `${(de.ms / 1000).toFixed(2)} s: ${g(((de.iso / 16) * samples) / (de.ms / 1000))} iso-samples/s (all isochromats: ${g((de.iso * samples) / (de.ms / 1000))}) | — | — | ${de.note} |`,
  );
}

/** The disc's engine time in-process after warm-up: prepare() outside the timing, then simulateCells on the Node executor with `workers` threads (as run() calls it); median of `runs`. */
async function discEngineInProcess(c: E2E, runs: number): Promise<{ ms: number; iso: number; note: string }> {
  const { prepare } = await import("../src/cli/pipeline.js");
  const { nodeExecutor } = await import("../src/engine/node.js");
  const out = mkdtempSync(join(tmpdir(), "isofold-bench-"));
  try {
    const o = e2eOptions(c, out);
    const p = prepare({ phantom: o.phantom, protocol: o.protocol, sets: o.sets, out, seed: 1, iso: o.iso, workers: c.workers });
    return await timedEngine(p, nodeExecutor(c.workers), c.readout ?? "fast", runs);
  } finally {
    rmSync(out, { recursive: true, force: true });
  }
}

/**
 * Median engine time (ms) of `runs` simulateCells calls on prepared cells, after 3 warm-up runs
 * (V8 optimises the hot functions over the first runs), with the last run's readout note.
 */
async function timedEngine(
  p: { seq: Sequence; cells: IsochromatCells; readonly iso: IsochromatSet; protocol: { receiverFilter: boolean } },
  executor: Executor, readout: "auto" | "fast" | "direct", runs: number,
): Promise<{ ms: number; iso: number; note: string }> {
  const { simulateCells } = await import("../src/engine/index.js");
  const once = () => simulateCells(executor, p.seq, p.cells, () => p.iso, { receiverFilter: p.protocol.receiverFilter, readout });
  for (let k = 0; k < 3; k++) await once();
  const ts: number[] = [];
  let note = "";
  for (let k = 0; k < runs; k++) {
    const t = performance.now();
    const r = await once();
    ts.push(performance.now() - t);
    note = readoutNote(r.readout);
  }
  return { ms: median(ts), iso: p.cells.count, note };
}

/** The time-segmented fold against the direct operator (one run each, in-process, serial executor; ratio fold/direct). */
async function foldRows(): Promise<void> {
  const { prepare } = await import("../src/cli/pipeline.js");
  const { simulateSerial } = await import("../src/engine/index.js");
  const { writeFileSync } = await import("node:fs");
  const tmp = mkdtempSync(join(tmpdir(), "isofold-bench-fold-"));
  try {
    const ph = JSON.parse(readFileSync("phantoms/two-bottle.json", "utf8")) as Record<string, unknown>;
    ph["b0"] = { expression: "1000 * y + 20000 * z" }; // 10 Hz/cm along y, 200 Hz/cm through the slice (readout groups = isochromats)
    const phantom = join(tmp, "two-bottle-b0.json");
    writeFileSync(phantom, JSON.stringify(ph));
    const quality = { density: 2, sliceCount: 12, sliceExtent: 3, fatModel: "multi" as const, t2primeIsochromats: 16, offsetHz: 0 };
    const prep = (protocol: string, n: number) => prepare({ phantom, protocol, sets: [`matrix.read=${n}`, `matrix.phase=${n}`], out: join(tmp, "out"), seed: 1, iso: quality, workers: 1 });
    const time = (p: ReturnType<typeof prep>, readout: "fast" | "direct" | "auto") => {
      const t = performance.now();
      const r = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout });
      return { ms: performance.now() - t, r };
    };
    time(prep("se-t2-1.5t", 32), "fast"); // warm-up
    console.log("");
    console.log("| time-segmented fold (one run each, in-process, serial) | isochromats | fold | direct | fold ÷ direct | auto chose | L, estimate, true rel. L2 |");
    console.log("| --- | --- | --- | --- | --- | --- | --- |");
    const cases = [["128² spin echo se-t2-1.5t", "se-t2-1.5t", 128], ["64² single-shot EPI epi-1.5t", "epi-1.5t", 64]] as const;
    for (const [label, protocol, n] of cases) {
      if (process.env["BENCH_FOLD_ROW"] && !label.includes(process.env["BENCH_FOLD_ROW"])) continue;
      const p = prep(protocol, n);
      p.iso; // made before timing
      const f = time(p, "fast"), d = time(p, "direct"), a = time(p, "auto");
      let num = 0, den = 0;
      for (let k = 0; k < d.r.kspace.re.length; k++) {
        num += (f.r.kspace.re[k]! - d.r.kspace.re[k]!) ** 2 + (f.r.kspace.im[k]! - d.r.kspace.im[k]!) ** 2;
        den += d.r.kspace.re[k]! ** 2 + d.r.kspace.im[k]! ** 2;
      }
      console.log(
        `| ${label}, two-bottle, B0 10 Hz/cm along y + 200 Hz/cm along z, T2′ spread 16, density 2, 12 through-slice | ${p.iso.count.toLocaleString("en")} | ${f.ms.toFixed(0)} ms | ${d.ms.toFixed(0)} ms | ` +
          `${(f.ms / d.ms).toFixed(2)} | ${a.r.readout.operator} (${a.ms.toFixed(0)} ms) | L ${f.r.readout.segments}, ${f.r.readout.estimate?.relL2.toExponential(1)}, ${Math.sqrt(num / den).toExponential(1)}${f.r.readout.kernelWidth ? `, non-uniform FFT width ${f.r.readout.kernelWidth}` : ""}${f.r.readout.fallback ? `, fell back: ${f.r.readout.fallback}` : ""} |`,
      );
    }
  } finally {
    rmSync(tmp, { recursive: true, force: true });
  }
}

/** One `isofold dataset` in a fresh process (the CLI of this build); seconds as the command reports them, wall seconds, and case 0's readout. */
function datasetRun(args: string[], out: string): { seconds: number; wall: number; made: number; readout: unknown } {
  const cli = join(dirname(SELF), "..", "src", "cli", "index.js");
  const t = performance.now();
  const r = spawnSync(process.execPath, [cli, "dataset", "phantoms/torso-slice.json", "-p", "gre-t1-3t", "--set", "matrix.read=128", "--set", "matrix.phase=128", "--workers", "2", "-q", "-o", out, ...args], { encoding: "utf8", maxBuffer: 1 << 24 });
  const wall = (performance.now() - t) / 1000;
  if (r.status !== 0) throw new Error(`bench dataset failed: ${r.stderr}`);
  const m = /(\d+) cases? written.*\(([0-9.]+) s/.exec(r.stdout);
  const caseJson = JSON.parse(readFileSync(join(out, "case-0000", "case.json"), "utf8")) as { engine: { readout: unknown } };
  return { seconds: Number(m?.[2]), wall, made: Number(m?.[1]), readout: caseJson.engine.readout };
}

/** Runs of each dataset case (1 and 8 coils), alternating. */
const DATASET_PAIRS = Number(process.env["BENCH_DATASET_PAIRS"] ?? 5);

/** Dataset rows: a 128² torso case with 1 and 8 coils, and the cases per hour of an eight-coil batch (issue 13 targets: ≤ 10 s, ≤ 2× one coil). */
function datasetRows(): void {
  const tmp = mkdtempSync(join(tmpdir(), "isofold-bench-dataset-"));
  try {
    // one report per coil block (dataset/simulate.ts SENS_BUDGET): the operators used, and the first block's note
    const note = (r: unknown) => {
      if (!Array.isArray(r)) return readoutNote(r);
      const ops = r.map((x) => (x as { operator?: string }).operator ?? "?");
      const counts = [...new Set(ops)].map((op) => `${op} ×${ops.filter((o) => o === op).length}`).join(", ");
      return `${r.length} coil blocks: ${counts}; block 0: ${readoutNote(r[0])}`;
    };
    console.log("");
    console.log("| dataset (isofold dataset, 128² torso gre-t1-3t, default options, 2 workers, fresh process) | 1 coil | 8 coils | 8 coils ÷ 1 coil (target ≤ 2) | readout (8 coils) |");
    console.log("| --- | --- | --- | --- | --- |");
    // one and eight coils alternating, DATASET_PAIRS times each (a ratio near its target needs more than one run): medians
    const ones: ReturnType<typeof datasetRun>[] = [], eights: ReturnType<typeof datasetRun>[] = [];
    for (let k = 0; k < DATASET_PAIRS; k++) {
      ones.push(datasetRun(["--coils", "1"], join(tmp, `one-${k}`)));
      eights.push(datasetRun(["--coils", "8"], join(tmp, `eight-${k}`)));
    }
    const one = { seconds: median(ones.map((r) => r.seconds)), wall: median(ones.map((r) => r.wall)) };
    const eight = { seconds: median(eights.map((r) => r.seconds)), wall: median(eights.map((r) => r.wall)), readout: eights[0]!.readout };
    const ratios = ones.map((o, k) => (eights[k]!.seconds / o.seconds).toFixed(2)).join(", ");
    console.log(
      `| one case (command's own time, median of ${DATASET_PAIRS} alternating runs; wall with start-up in brackets; target ≤ 10 s for 8 coils) | ${one.seconds.toFixed(2)} s (${one.wall.toFixed(1)} s) | ` +
        `${eight.seconds.toFixed(2)} s (${eight.wall.toFixed(1)} s) | ${(eight.seconds / one.seconds).toFixed(2)}× (pairs: ${ratios}) | ${note(eight.readout)} |`,
    );
    const n = Number(process.env["BENCH_DATASET_CASES"] ?? 3);
    const batch = datasetRun(["--coils", "8", "--count", String(n), "--vary", "position=5mm,rotation=5deg,t1=5%"], join(tmp, "batch"));
    const perCase = batch.seconds / batch.made;
    console.log(
      `| 1000-case 128² eight-coil batch on 2 cores: estimated from a short batch of ${batch.made} cases (--vary position, rotation, T1; one-time set-up spread over them), ` +
        `${batch.seconds.toFixed(1)} s in all | — | ${perCase.toFixed(1)} s per case | ${Math.round(3600 / perCase)} cases per hour (1000 cases ≈ ${((1000 * perCase) / 3600).toFixed(1)} h) | ${note(batch.readout)} |`,
    );
    // B0 varying per case (an offset and a linear field): every isochromat its own Δf, the fast operator with Δf interpolated
    const b0 = datasetRun(["--coils", "8", "--count", "2", "--vary", "position=5mm,b0=20Hz"], join(tmp, "b0"));
    const b0Case = b0.seconds / b0.made;
    console.log(
      `| the same batch with --vary b0=20Hz (a B0 offset and linear field per case: Δf in every cell, interpolated between nodes), ${b0.made} cases, ` +
        `${b0.seconds.toFixed(1)} s in all | — | ${b0Case.toFixed(1)} s per case | ${Math.round(3600 / b0Case)} cases per hour | ${note(b0.readout)} |`,
    );
  } finally {
    rmSync(tmp, { recursive: true, force: true });
  }
}

function g(x: number): string {
  if (x >= 1e9) return `${(x / 1e9).toFixed(2)} G`;
  if (x >= 1e6) return `${(x / 1e6).toFixed(1)} M`;
  return `${(x / 1e3).toFixed(1)} k`;
}

/**
 * Every bundled preset on the torso phantom with the command line's own defaults, as a new user runs it
 * (`isofold simulate phantoms/torso-slice.json -p <preset>`): wall time of the whole process (module loading
 * included), peak RSS, isochromats and the readout operator; a refusal (exit 2) is shown with its reason.
 */
function presetRows(): void {
  const presets = readdirSync(join("src", "protocol", "presets")).filter((f) => f.endsWith(".json")).map((f) => f.replace(/\.json$/, "")).sort();
  console.log("");
  console.log("| every preset on the torso, command-line defaults (fresh process, module loading included) | isochromats | wall time, peak RSS | readout |");
  console.log("| --- | --- | --- | --- |");
  for (const preset of presets) {
    const out = mkdtempSync(join(tmpdir(), "isofold-bench-preset-"));
    try {
      const t = performance.now();
      const r = spawnSync(process.execPath, [SELF, "--cli", JSON.stringify(["simulate", "phantoms/torso-slice.json", "-p", preset, "-o", join(out, "run"), "-q"])], { encoding: "utf8", maxBuffer: 1 << 24 });
      const seconds = (performance.now() - t) / 1000;
      const rss = Number(/BENCH_RSS_KIB (\d+)/.exec(r.stderr)?.[1] ?? NaN) / 1024;
      if (r.status !== 0) {
        const why = r.stderr.split("\n").find((l) => l.startsWith("isofold: error:")) ?? `exit ${r.status}`;
        // the estimate and what the refusal suggests (the line's head and tail)
        const short = why.length > 260 ? `${why.slice(0, 110)} … ${why.slice(-140)}` : why;
        console.log(`| ${preset} | — | refused after ${seconds.toFixed(1)} s | ${short.replace(/\|/g, "/")} |`);
        continue;
      }
      const rep = JSON.parse(readFileSync(join(out, "run", "report.json"), "utf8")) as { isochromats: { count: number }; engine: { readout: unknown } };
      const ro = Array.isArray(rep.engine.readout) ? rep.engine.readout[0] : rep.engine.readout;
      console.log(`| ${preset} | ${rep.isochromats.count.toLocaleString("en")} | ${seconds.toFixed(1)} s, ${rss.toFixed(0)} MiB | ${readoutNote(ro).replace(/\|/g, "/")} |`);
    } finally {
      rmSync(out, { recursive: true, force: true });
    }
  }
}

async function main(): Promise<void> {
  const runs = Number(process.env["BENCH_RUNS"] ?? 3);
  if (process.env["BENCH_ONLY"] === "presets") {
    presetRows();
    return;
  }
  if (process.env["BENCH_ONLY"] === "fast") {
    await fastRows(runs);
    return;
  }
  if (process.env["BENCH_ONLY"] === "disc") {
    await discRows(runs, true);
    return;
  }
  if (process.env["BENCH_ONLY"] === "dataset") {
    datasetRows();
    return;
  }
  if (process.env["BENCH_ONLY"] === "fold") {
    await foldRows();
    return;
  }
  console.log(`isofold bench — ${cpus()[0]?.model ?? "cpu"}, ${availableParallelism()} cores, Node ${process.versions.node}; WebAssembly SIMD readout: ${wasmKernel() ? "yes" : "no (scalar fallback)"}`);
  console.log("");
  console.log("| kernel | threads | throughput (median of 5) |");
  console.log("| --- | --- | --- |");
  const rWork = GROUPS * SAMPLES * LINES;
  for (const kind of ["readout-scalar", "readout-wasm"] as const) {
    const one: number[] = [];
    for (let k = 0; k < 5; k++) one.push(runJob({ kind, a: 0, b: GROUPS }));
    console.log(`| readout ${kind === "readout-wasm" ? "WebAssembly SIMD" : "TypeScript twin (WASM off)"}, ${GROUPS} groups × ${SAMPLES} samples × ${LINES} lines | 1 | ${g(rWork / median(one))} iso-samples/s |`);
    const two: number[] = [];
    for (let k = 0; k < 5; k++) two.push(await twoWorkers(kind, GROUPS));
    console.log(`| readout ${kind === "readout-wasm" ? "WebAssembly SIMD" : "TypeScript twin (WASM off)"} | 2 workers | ${g(rWork / median(two))} iso-samples/s |`);
  }
  const fWork = RF_ISO * RF_STEPS;
  for (const kind of ["rf-scalar", "rf-wasm"] as const) {
    const rf1: number[] = [], rf2: number[] = [];
    for (let k = 0; k < 5; k++) rf1.push(runJob({ kind, a: 0, b: RF_ISO }));
    for (let k = 0; k < 5; k++) rf2.push(await twoWorkers(kind, RF_ISO));
    const label = kind === "rf-wasm" ? "WebAssembly SIMD, 2 classes per lane pair" : "TypeScript twin (WASM off)";
    console.log(`| RF map ${label}, ${RF_STEPS}-step sinc, ${RF_ISO} isochromats of distinct frequency | 1 | ${g(fWork / median(rf1))} iso-steps/s |`);
    console.log(`| RF map ${label} | 2 workers | ${g(fWork / median(rf2))} iso-steps/s |`);
  }
  console.log("");
  console.log(`| end to end (run(): prepare, simulate, recon, write) | isochromats | workers | seconds (median of ${runs}) | peak RSS |`);
  console.log("| --- | --- | --- | --- | --- |");
  const phantom = "phantoms/torso-slice.json", protocol = "gre-t1-3t";
  for (const matrix of [128, 256]) {
    for (const density of [1, 2]) {
      for (const workers of [1, 2]) {
        const r = e2e({ phantom, protocol, matrix, density, slice: 1, workers }, runs);
        console.log(`| GRE ${matrix}², torso, ${density * density} per voxel (1 through-slice) | ${r.iso.toLocaleString("en")} | ${workers} | ${r.seconds.toFixed(2)} | ${r.maxRssMiB.toFixed(0)} MiB |`);
      }
    }
  }
  if (process.env["BENCH_TARGET"] !== "0") {
    for (const ph of ["phantoms/disc.json", phantom]) {
      const r = e2e({ phantom: ph, protocol, matrix: 256, density: 2, slice: 16, workers: 2 }, ph === phantom ? 1 : runs);
      console.log(`| target: GRE 256², ${ph.replace("phantoms/", "").replace(".json", "")}, 2×2 in-plane × 16 through-slice | ${r.iso.toLocaleString("en")} | 2 | ${r.seconds.toFixed(2)}${r.runs === 1 ? " (1 run)" : ""} | ${r.maxRssMiB.toFixed(0)} MiB |`);
    }
  }
  await fastRows(runs);
  await foldRows();
  if (process.env["BENCH_PRESETS"] !== "0") presetRows();
  if (process.env["BENCH_DATASET"] !== "0") datasetRows();
}

if (!isMainThread) {
  const j = workerData as Job;
  runJob({ ...j, b: Math.min(j.b, j.a + 1024) }); // warm-up
  parentPort!.postMessage("ready");
  parentPort!.once("message", () => parentPort!.postMessage(runJob(j)));
} else if (process.argv[2] === "--e2e") {
  await e2eChild(JSON.parse(process.argv[3]!) as E2E);
} else if (process.argv[2] === "--cli") {
  // the command line itself in this process (its own defaults), and this process's peak RSS on stderr at exit
  const args = JSON.parse(process.argv[3]!) as string[];
  const cli = join(dirname(SELF), "..", "src", "cli", "index.js");
  process.argv = [process.argv[0]!, cli, ...args];
  process.on("exit", () => process.stderr.write(`\nBENCH_RSS_KIB ${process.resourceUsage().maxRSS}\n`));
  await import(cli);
} else {
  await main();
}
