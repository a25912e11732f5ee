/**
 * `isofold sweep`: a grid of protocols (each --vary key=from..to:steps), one
 * simulate run per point (a run folder each, on the engine's worker pool),
 * then sweep.csv, montage.png, one plot per metric and varied parameter
 * (vega-lite → SVG) and sweep.html. Bad input is refused before anything is
 * written; a point the sequence cannot play (TE below the minimum, …) is
 * listed with the reason and skipped. No physics here.
 */
import type { Command } from "commander";
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { PNG } from "pngjs";
import { UserError } from "../errors.js";
import { loadPhantom, loadProtocol } from "./inputs.js";
import { decodeNpy } from "../io/npy.js";
import { encodeGrayPng } from "../io/png.js";
import { OutputStage } from "../io/atomic.js";
import { withOutputDir } from "../io/outpath.js";
import { lineSpec, montage, renderSweepHtml, vegaLiteSvg, type SweepColumn, type SweepRow, type Tile } from "../report/index.js";
import { libraryInput, printWarnings, readRealNpy, run, SAFETY_NOTE, version, type RunOptions } from "./pipeline.js";
import { t2primeClosedTissues } from "../api.js";
import { addSimulationOptions, collect, engineOptions, isoOptions } from "./options.js";

/** One --vary: the key, the unit the ends were written in, and the values of the grid along it. */
export interface Vary {
  raw: string;
  key: string;
  unit: string;
  values: number[];
}

/** Largest number of grid points a sweep accepts. */
export const MAX_POINTS = 400;

const NUMBER = /^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$/;

/** Parses "key=from..to:steps"; throws a one-line UserError that says what would work. */
export function parseVary(raw: string): Vary {
  const eg = 'write it like --vary te=5ms..20ms:4 or --vary "matrix.read=32..64:3"';
  const eq = raw.indexOf("=");
  if (eq <= 0) throw new UserError(`--vary ${JSON.stringify(raw)}: expected key=from..to:steps; ${eg}`);
  const key = raw.slice(0, eq).trim();
  const rest = raw.slice(eq + 1);
  const m = /^(.*?)\.\.(.*):\s*([-+]?[\d.]+)\s*$/.exec(rest);
  if (!m) throw new UserError(`--vary ${key}: expected from..to:steps after "=", got ${JSON.stringify(rest)}; ${eg}`);
  const steps = Number(m[3]);
  if (!Number.isInteger(steps) || steps < 1) {
    throw new UserError(`--vary ${key}: steps must be a whole number of at least 1, got ${m[3]}; ${eg}`);
  }
  const a = NUMBER.exec(m[1]!), b = NUMBER.exec(m[2]!);
  if (!a || !b) throw new UserError(`--vary ${key}: cannot read ${JSON.stringify(!a ? m[1] : m[2])} as a number with units; ${eg}`);
  const from = Number(a[1]), to = Number(b[1]);
  const ua = a[2]!.replace(/\s+/g, " "), ub = b[2]!.replace(/\s+/g, " ");
  if (ua !== ub) throw new UserError(`--vary ${key}: write both ends in the same unit (got "${ua}" and "${ub}"), e.g. ${key}=${from}${ua || ub}..${to}${ua || ub}:${steps}`);
  if (from > to) throw new UserError(`--vary ${key}: from (${from} ${ua}) is above to (${to} ${ua}); write ${key}=${to}${ua}..${from}${ua}:${steps}`);
  if (steps === 1 && from !== to) throw new UserError(`--vary ${key}: 1 step needs from = to; use at least 2 steps for ${from}..${to} ${ua}`);
  if (steps > 1 && from === to) throw new UserError(`--vary ${key}: from equals to (${from} ${ua}); use 1 step or a wider range`);
  const values = Array.from({ length: steps }, (_, i) => (steps === 1 ? from : from + ((to - from) * i) / (steps - 1)));
  // a whole-number range without units (matrix sizes, counts) stays whole
  const whole = ua === "" && Number.isInteger(from) && Number.isInteger(to);
  return { raw, key, unit: ua, values: whole ? values.map(Math.round) : values.map((v) => Number(v.toPrecision(12))) };
}

/** The --set text of a value. */
export function setText(v: Vary, value: number): string {
  return `${v.key}=${value}${v.unit ? ` ${v.unit}` : ""}`;
}

/** Grid points, the first --vary running fastest. */
export function grid(varies: Vary[]): number[][] {
  let pts: number[][] = [[]];
  // each later vary repeats the points so far once per value: the first vary runs fastest
  for (const v of varies) pts = v.values.flatMap((x) => pts.map((p) => [...p, x]));
  return pts;
}

/** Checks every input before anything runs or is written; throws UserError. */
export function validateSweep(phantom: string, protocol: string, sets: string[], varies: Vary[]): void {
  if (varies.length === 0) throw new UserError("sweep: give at least one --vary key=from..to:steps, e.g. --vary te=5ms..20ms:4");
  const seen = new Set<string>();
  for (const v of varies) {
    if (seen.has(v.key)) throw new UserError(`--vary ${v.key}: given twice; vary each key once`);
    seen.add(v.key);
  }
  const n = varies.reduce((a, v) => a * v.values.length, 1);
  if (n > MAX_POINTS) throw new UserError(`sweep: ${n} points is more than ${MAX_POINTS}; use fewer steps`);
  let field = 0;
  for (const v of varies) {
    for (const x of [v.values[0]!, v.values[v.values.length - 1]!]) {
      try {
        field = loadProtocol(protocol, [...sets, setText(v, x)]).field;
      } catch (e) {
        if (e instanceof UserError) {
          const detail = e.keyPath === v.key || e.keyPath?.startsWith(`${v.key}.`) || /unknown key/.test(e.detail) ? e.detail : e.message;
          throw new UserError(`--vary ${v.key}: ${detail}`);
        }
        throw e;
      }
    }
  }
  loadPhantom(phantom, field, { readArray: readRealNpy });
}

export interface SweepOptions {
  phantom: string;
  protocol: string;
  sets: string[];
  varies: Vary[];
  out: string;
  base: Omit<RunOptions, "phantom" | "protocol" | "sets" | "out">;
  log?: (line: string) => void;
}

interface Metric extends SweepColumn {
  get: (rep: Record<string, any>, roiMean: number) => number | null;
}

const num = (v: unknown): number | null => (typeof v === "number" && Number.isFinite(v) ? v : null);

const METRICS: Metric[] = [
  { key: "roiMean", label: "mean magnitude in the ROI (central half of the FOV)", unit: "a.u.", get: (_r, m) => m },
  { key: "imageMax", label: "image maximum", unit: "a.u.", get: (r) => num(r.measurements?.imageMax) },
  { key: "fatShiftReadPredicted", label: "fat shift along read, predicted", unit: "px", get: (r) => num(r.fatShift?.predicted?.readout?.px) },
  { key: "fatShiftReadMeasured", label: "fat shift along read, measured", unit: "px", get: (r) => num(r.fatShift?.measured?.readout?.px) },
  { key: "fatShiftPhasePredicted", label: "fat shift along phase, predicted", unit: "px", get: (r) => num(r.fatShift?.predicted?.phase?.px) },
  { key: "relativeSnr", label: "relative SNR (closed form, against the stated reference)", unit: "", get: (r) => num(r.sequence?.derived?.relativeSnr?.value) },
  { key: "scanTime", label: "scan time", unit: "s", get: (r) => num(r.sequence?.derived?.scanTime?.value) },
  { key: "simulationTime", label: "simulation time", unit: "s", get: (r) => num(r.timingSeconds) },
];

/** Mean magnitude of the central half of the FOV of the central plane of image.npy. */
function roiMean(file: string): number {
  const a = decodeNpy(readFileSync(file), file);
  const [, sl, np, nr] = a.shape as [number, number, number, number];
  const { re, im } = a.data as { re: ArrayLike<number>; im: ArrayLike<number> };
  const base = Math.floor(sl / 2) * np * nr;
  let s = 0, n = 0;
  for (let p = Math.floor(np / 4); p < Math.ceil((3 * np) / 4); p++) {
    for (let r = Math.floor(nr / 4); r < Math.ceil((3 * nr) / 4); r++) {
      s += Math.hypot(re[base + p * nr + r]!, im[base + p * nr + r]!);
      n++;
    }
  }
  return n ? s / n : 0;
}

function csvCell(v: string | number | null): string {
  if (v === null) return "";
  const s = String(v);
  return /[",\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s;
}

/** Runs the sweep and writes its files; resolves to the list of sweep-level files. */
export async function runSweep(o: SweepOptions): Promise<{ files: string[]; done: number; impossible: number; dir: string }> {
  validateSweep(o.phantom, o.protocol, o.sets, o.varies);
  const pts = grid(o.varies);
  const rows: SweepRow[] = [];
  const tiles: Tile[] = [];
  const warnings = new Set<string>();
  const width = String(pts.length).length;
  const setsOf = (p: number[]) => [...o.sets, ...o.varies.map((v, k) => setText(v, p[k]!))];
  // one T2′ model for the whole sweep: where "auto" takes the closed form at some point (a gradient echo whose spread
  // would be off by more than 5 % there), every point takes it, so the metrics do not step where auto would switch
  let base = o.base;
  if ((base.iso?.t2primeModel ?? "auto") === "auto") {
    const closedSomewhere = pts.some((p) => {
      try {
        return t2primeClosedTissues(libraryInput({ ...base, phantom: o.phantom, protocol: o.protocol, sets: setsOf(p), out: o.out })).some(Boolean);
      } catch {
        return false; // an impossible point says why when it runs
      }
    });
    if (closedSomewhere) {
      base = { ...base, iso: { ...base.iso!, t2primeModel: "closed-form" } };
      o.log?.("T2′ in closed form (R2* = R2 + R2′) at every point: the auto model takes it at some of them, and one model keeps the sweep free of steps");
    }
  }
  for (let i = 0; i < pts.length; i++) {
    const p = pts[i]!;
    const name = `point-${String(i + 1).padStart(width, "0")}`;
    const sets = setsOf(p);
    const params = Object.fromEntries(o.varies.map((v, k) => [v.key, p[k]!]));
    const labels = o.varies.map((v, k) => `${v.key}=${p[k]}${v.unit ? ` ${v.unit}` : ""}`);
    try {
      const r = await run({ ...base, phantom: o.phantom, protocol: o.protocol, sets, out: join(o.out, name), quiet: true, keepWarnings: true });
      const rm = roiMean(join(r.dir, "image.npy"));
      rows.push({ point: i + 1, status: "done", params, metrics: Object.fromEntries(METRICS.map((m) => [m.key, m.get(r.report, rm)])), link: `${name}/report.html` });
      for (const w of (r.report.warnings as string[]) ?? []) warnings.add(w);
      const png = PNG.sync.read(readFileSync(join(r.dir, "image.png")));
      const values = new Float64Array(png.width * png.height);
      for (let k = 0; k < values.length; k++) values[k] = png.data[4 * k]! / 255;
      tiles.push({ values, width: png.width, height: png.height, labels: [`#${i + 1}`, ...labels] });
      o.log?.(`point ${i + 1}/${pts.length} ${labels.join(" ")}: ${r.seconds.toFixed(1)} s`);
    } catch (e) {
      if (!(e instanceof UserError)) throw e;
      rows.push({ point: i + 1, status: "impossible", params, metrics: {}, reason: e.message });
      tiles.push({ values: null, width: 1, height: 1, labels: [`#${i + 1} impossible`, ...labels] });
      o.log?.(`point ${i + 1}/${pts.length} ${labels.join(" ")}: impossible, skipped: ${e.message}`);
    }
  }
  const done = rows.filter((r) => r.status === "done");
  if (done.length === 0) {
    throw new UserError(`every point of the sweep is impossible (point 1: ${rows[0]!.reason}); change the ranges`);
  }
  const metrics = METRICS.filter((m) => done.some((r) => r.metrics[m.key] !== null && r.metrics[m.key] !== undefined) && !(m.key === "fatShiftPhasePredicted" && done.every((r) => !r.metrics[m.key])));
  const params: SweepColumn[] = o.varies.map((v) => ({ key: v.key, label: v.key, unit: v.unit || "count" }));

  const stage = new OutputStage(o.out);
  try {
    // sweep.csv: units in the header
    const header = ["point", "status", ...params.map((c) => `${c.label} (${c.unit})`), ...metrics.map((m) => `${m.key} (${m.unit || "1"})`), "reason"];
    const lines = [header.map(csvCell).join(",")];
    for (const r of rows) {
      lines.push([r.point, r.status, ...params.map((c) => r.params[c.key] ?? null), ...metrics.map((m) => r.metrics[m.key] ?? null), r.reason ?? ""].map(csvCell).join(","));
    }
    stage.add("sweep.csv", lines.join("\n") + "\n");

    const columns = o.varies[0]!.values.length;
    const mt = montage(tiles, columns);
    const mpng = encodeGrayPng(mt.values, mt.width, mt.height, { low: 0, high: 1, text: { Comment: `isofold sweep montage: ${o.varies.map((v) => v.raw).join("; ")}` } }).png;
    stage.add("montage.png", mpng);

    const plots: { title: string; svg: string }[] = [];
    for (const m of metrics.filter((x) => x.key !== "simulationTime")) {
      for (const [k, v] of o.varies.entries()) {
        const others = o.varies.filter((_, j) => j !== k);
        const groups = new Map<string, { x: number; y: number }[]>();
        for (const r of done) {
          const y = r.metrics[m.key];
          if (y === null || y === undefined) continue;
          const g = others.map((w) => `${w.key}=${r.params[w.key]}${w.unit ? ` ${w.unit}` : ""}`).join(", ") || m.label;
          if (!groups.has(g)) groups.set(g, []);
          groups.get(g)!.push({ x: r.params[v.key]!, y });
        }
        const series = [...groups].map(([name, points]) => ({ name, points: points.sort((a, b) => a.x - b.x) }));
        const title = `${m.label} against ${v.key}`;
        const svg = await vegaLiteSvg(lineSpec({ title, xTitle: `${v.key} (${v.unit || "count"})`, yTitle: `${m.key}${m.unit ? ` (${m.unit})` : ""}`, series, width: 360, height: 200 }));
        const file = `plot-${m.key}-vs-${v.key.replace(/[^A-Za-z0-9]+/g, "_")}.svg`;
        stage.add(file, svg);
        plots.push({ title, svg });
      }
    }

    stage.add("sweep.html", renderSweepHtml({
      title: `isofold sweep of ${o.protocol} on ${o.phantom.split("/").pop()}`,
      subtitle: `Varied: ${o.varies.map((v) => v.raw).join("; ")}. ${done.length} of ${rows.length} points simulated; simulated images, not scans.`,
      safety: SAFETY_NOTE,
      params, metrics, rows, montage: mpng, montageSize: { width: mt.width, height: mt.height },
      montageNote: `Each tile is a point's image.png (display orientation as in its report), labelled with its number and values; a crossed tile is an impossible point. Columns follow ${o.varies[0]!.key}.`,
      plots, warnings: [...warnings],
      footer: `Made by isofold ${version()}. Self-contained page: montage inline, plots rendered by vega from vega-lite specifications, no network.`,
    }));
    stage.commit();
    printWarnings([...warnings]);
    return { files: stage.staged, done: done.length, impossible: rows.length - done.length, dir: o.out };
  } catch (e) {
    stage.abort();
    throw e;
  }
}

export function registerSweep(program: Command): void {
  addSimulationOptions(
    program
      .command("sweep")
      .description("simulate a grid of protocols (--vary key=from..to:steps, repeatable) and write sweep.csv, montage.png, plots (SVG) and sweep.html, with a run folder per point")
      .argument("<phantom>", "phantom file (JSON)")
      .requiredOption("-p, --protocol <file>", "protocol file (JSON) or bundled preset name")
      .option("--vary <key=from..to:steps>", 'vary a protocol key over steps evenly spaced values, ends included, repeatable; units as in the protocol, e.g. --vary te=5ms..20ms:4 --vary "matrix.read=32..64:3"', collect, [])
      .option("-s, --set <key=value>", "override a protocol value for every point, repeatable", collect, [])
      .option("-o, --out <dir>", "output folder of the sweep", "out/sweep"),
  ).action(async (phantom: string, o) => {
    if (o.shard) throw new UserError("--shard: a sweep runs whole points; shard a single simulate run instead");
    const varies = (o.vary as string[]).map(parseVary);
    validateSweep(phantom, o.protocol, o.set, varies);
    const r = await withOutputDir(o.out, () => runSweep({
      phantom, protocol: o.protocol, sets: o.set, varies, out: o.out,
      base: { seed: o.seed, iso: isoOptions(o), ...engineOptions(o) },
      log: o.quiet ? undefined : (l) => process.stderr.write(l + "\n"),
    }));
    console.log(`sweep: ${r.done} points simulated, ${r.impossible} impossible and skipped; wrote ${r.files.join(", ")} and a run folder per point to ${r.dir}`);
  });
}
