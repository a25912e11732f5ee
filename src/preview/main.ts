/**
 * The previewer page: controls that write the CLI's `--set key=value`
 * overrides, the URL that holds them, the views of the newest result the
 * engine worker sends back, and the exports. Every number shown carries a
 * data-key with its report.json key. No file is sent anywhere.
 */
import { toDisplay, displayPoint, type DisplayTransform } from "../report/display.js";
import type { RunOutput } from "./engine.js";
import { insertTextChunks, SIMULATED_NOTE } from "../io/png.js";

interface Config {
  safety: string;
  presets: string[];
  phantoms: string[];
  start: { protocol: string; phantom: string };
  given: { protocol?: { name: string; object: unknown }; phantom?: { name: string; object: unknown }; maps?: { name: string; url: string }[] };
}
interface Control { key: string; label: string; unit: string; kind: "number" | "select" | "check" | "bandwidth"; options?: string[]; step?: string;
  /** SI value of the effective protocol → the control's value in its unit. */ from: (p: Record<string, any>) => string; }

const $ = <T extends HTMLElement>(id: string) => document.getElementById(id) as T;
const num = (v: number, d = 3) => (Number.isFinite(v) ? Number(v.toPrecision(d + 2)).toString() : "—");

const CONTROLS: Control[] = [
  { key: "sequence", label: "sequence", unit: "", kind: "select", options: ["gre", "se", "gre3d", "bssfp", "rare", "epi"], from: (p) => p.sequence },
  { key: "field", label: "field", unit: "T", kind: "number", step: "0.5", from: (p) => num(p.field) },
  { key: "bandwidth", label: "receiver bandwidth", unit: "", kind: "bandwidth", from: (p) => num(p.pixelBandwidth) },
  { key: "fov.read", label: "FOV along read", unit: "cm", kind: "number", step: "1", from: (p) => num(p.fov.read * 100) },
  { key: "fov.phase", label: "FOV along phase", unit: "cm", kind: "number", step: "1", from: (p) => num(p.fov.phase * 100) },
  { key: "phaseDirection", label: "phase direction", unit: "", kind: "select", options: ["x", "y", "z"], from: (p) => p.phaseDirection },
  { key: "matrix.read", label: "matrix along read", unit: "px", kind: "number", step: "16", from: (p) => String(p.matrix.read) },
  { key: "matrix.phase", label: "matrix along phase", unit: "px", kind: "number", step: "16", from: (p) => String(p.matrix.phase) },
  { key: "slice.thickness", label: "slice thickness", unit: "mm", kind: "number", step: "1", from: (p) => num(p.slice.thickness * 1e3) },
  { key: "te", label: "echo time TE", unit: "ms", kind: "number", step: "0.5", from: (p) => num(p.te * 1e3) },
  { key: "tr", label: "repetition time TR", unit: "ms", kind: "number", step: "1", from: (p) => num(p.tr * 1e3) },
  { key: "flip", label: "flip angle", unit: "deg", kind: "number", step: "5", from: (p) => num((p.flip * 180) / Math.PI) },
  { key: "oversampling.read", label: "read oversampling", unit: "×", kind: "number", step: "0.5", from: (p) => num(p.oversampling.read) },
  { key: "oversampling.phase", label: "phase oversampling", unit: "fraction", kind: "number", step: "0.1", from: (p) => num(p.oversampling.phase) },
  { key: "receiverFilter", label: "receiver filter", unit: "", kind: "check", from: (p) => String(p.receiverFilter) },
  { key: "partialFourier.phase", label: "partial Fourier (phase lines kept)", unit: "fraction", kind: "number", step: "0.05", from: (p) => num(p.partialFourier.phase) },
  { key: "shim", label: "B0 offset (shim)", unit: "Hz", kind: "number", step: "10", from: (p) => num(p.shim) },
];
const BW_UNITS: [string, string][] = [["Hz/px", "per pixel"], ["kHz", "total"], ["±kHz", "half"], ["px", "fat shift"]];

const state = { protocol: "", phantom: "", sets: new Map<string, string>(), fat: "multi" as "single" | "multi", b0: [0, 0, 0] as [number, number, number] };
/** The refinement to default quality starts this long after an edit's preview is painted, unless a newer edit came first: a burst of edits is not refined in between, and the refinement does not take the cores the next preview needs. */
const REFINE_DELAY_MS = 300;
let refineTimer: ReturnType<typeof setTimeout> | null = null;
let gen = 0;
let shared: Int32Array | null = null;
let last: RunOutput | null = null;
const editStart = new Map<number, number>();
const editRefining = new Map<number, boolean>();
/** Per painted preview: edit → paint, and where the time went (ms): to the worker, in it by stage, back, drawing, the frame. */
const latencies: { gen: number; ms: number; matrix: number; stages: Record<string, number> }[] = [];
(window as any).__preview = { latencies, get last() { return last; }, get gen() { return gen; }, shown: 0 };

// one worker answers edits at preview quality, a second refines the newest result to default quality on the other core
const worker = new Worker("worker.js", { type: "module" });
/**
 * The refining worker. A newer edit that finds it at work ends it at once
 * (terminate: its setup of a large isochromat set cannot be interrupted
 * otherwise, and would hold a core the next preview needs); the next
 * refinement starts a new one.
 */
let refiner: Worker | null = null;
/** What every refining worker is told before its first request (init, chosen files, field maps), in order. */
const refinerSetup: unknown[] = [];
let onWorkerMessage: (ev: MessageEvent) => void = () => {};
function makeRefiner(): Worker {
  const w = new Worker("worker.js", { type: "module" });
  w.onmessage = (ev) => onWorkerMessage(ev);
  for (const m of refinerSetup) w.postMessage(m);
  return w;
}
function toRefiner(m: unknown): void {
  refinerSetup.push(m);
  refiner?.postMessage(m);
}
let lastReq: Record<string, unknown> | null = null;
/** Protocol objects of files (named on the command line or chosen in the page), for the protocol export. */
const fileProtocols = new Map<string, unknown>();

function readUrl(cfg: Config): void {
  const q = new URLSearchParams(location.search);
  state.protocol = q.get("protocol") ?? cfg.start.protocol;
  state.phantom = q.get("phantom") ?? cfg.start.phantom;
  state.fat = q.get("fat") === "single" ? "single" : "multi";
  const b = (q.get("b0") ?? "").split(",").map(Number);
  state.b0 = [0, 1, 2].map((i) => (Number.isFinite(b[i]) ? b[i]! : 0)) as [number, number, number];
  state.sets.clear();
  for (const s of q.getAll("set")) {
    const i = s.indexOf("=");
    if (i > 0) state.sets.set(s.slice(0, i).trim(), s.slice(i + 1).trim());
  }
}
function writeUrl(): void {
  const q = new URLSearchParams();
  q.set("protocol", state.protocol);
  q.set("phantom", state.phantom);
  if (state.fat !== "multi") q.set("fat", state.fat);
  if (state.b0.some((v) => v !== 0)) q.set("b0", state.b0.join(","));
  for (const [k, v] of state.sets) q.append("set", `${k}=${v}`);
  history.replaceState(null, "", `?${q.toString().replace(/\+/g, "%20")}`);
}

/** The worker's name of an input: a bundled name, or "file:" and the file name with only safe characters. */
function inputName(name: string): string {
  return name.startsWith("file:") ? `file:${name.slice(5).replace(/[^A-Za-z0-9._-]/g, "_")}` : name;
}

/** Whether the refining worker is at work (from posting a request until its result, error or cancellation). */
let refining = false;

function run(t0: number): void {
  gen += 1;
  editRefining.set(gen, refining);
  if (refineTimer !== null) clearTimeout(refineTimer);
  refineTimer = null;
  editStart.set(gen, t0);
  if (shared) Atomics.store(shared, 0, gen);
  else for (const w of [worker, refiner]) w?.postMessage({ t: "latest", gen });
  if (refining) {
    refiner?.terminate();
    refiner = null;
    refining = false;
  }
  writeUrl();
  $("progress-wrap").hidden = true;
  lastReq = { protocol: inputName(state.protocol), phantom: inputName(state.phantom), sets: [...state.sets].map(([k, v]) => `${k}=${v}`), fatModel: state.fat, quality: "preview", b0Linear: state.b0 };
  worker.postMessage({ t: "run", gen, req: lastReq });
}

function buildControls(): void {
  const box = $("settings");
  for (const c of CONTROLS) {
    const row = document.createElement("div");
    row.className = "row";
    const id = `c-${c.key.replace(/\./g, "-")}`;
    row.innerHTML = `<label for="${id}">${c.label}</label>`;
    let input: HTMLInputElement | HTMLSelectElement;
    if (c.kind === "select") {
      input = document.createElement("select");
      for (const o of c.options!) input.append(new Option(o, o));
    } else {
      input = document.createElement("input");
      input.type = c.kind === "check" ? "checkbox" : "number";
      if (c.step) input.step = c.step;
      if (c.kind === "bandwidth") input.step = "10";
    }
    input.id = id;
    input.dataset.setKey = c.key;
    row.append(input);
    if (c.kind === "bandwidth") {
      const u = document.createElement("select");
      u.id = "c-bandwidth-unit";
      u.setAttribute("aria-label", "bandwidth convention");
      for (const [v, l] of BW_UNITS) u.append(new Option(`${v} (${l})`, v));
      row.append(u);
      u.addEventListener("change", () => syncControls(true));
    } else if (c.unit) {
      const s = document.createElement("span");
      s.className = "unit";
      s.textContent = c.unit;
      row.append(s);
    }
    const err = document.createElement("div");
    err.className = "error";
    err.id = `e-${c.key.replace(/\./g, "-")}`;
    err.setAttribute("role", "alert");
    row.append(err);
    if (c.kind === "bandwidth") {
      const all = document.createElement("div");
      all.className = "bwall";
      all.id = "bw-all";
      row.append(all);
    }
    box.append(row);
    input.addEventListener("change", (ev) => {
      let v: string;
      if (c.kind === "check") v = String((input as HTMLInputElement).checked);
      else if (c.kind === "select") v = input.value;
      else if (input.value.trim() === "") return;
      else if (c.kind === "bandwidth") {
        const u = ($("c-bandwidth-unit") as HTMLSelectElement).value;
        v = u === "±kHz" ? `±${input.value} kHz` : `${input.value} ${u}`;
      } else v = c.unit && c.unit !== "×" && c.unit !== "fraction" && c.unit !== "px" ? `${input.value} ${c.unit}` : input.value;
      state.sets.set(c.key, v);
      run(ev.timeStamp);
    });
  }
}

/** Puts the effective protocol's values into the controls (those being edited keep what was typed when it was refused). */
function syncControls(bwOnly = false): void {
  if (!last) return;
  const p = last.protocol as unknown as Record<string, any>;
  for (const c of CONTROLS) {
    if (bwOnly && c.kind !== "bandwidth") continue;
    const el = document.getElementById(`c-${c.key.replace(/\./g, "-")}`) as HTMLInputElement;
    if (!el || document.getElementById(`e-${c.key.replace(/\./g, "-")}`)!.textContent) continue;
    if (c.kind === "check") el.checked = p[c.key] === true;
    else if (c.kind === "bandwidth") {
      const u = ($("c-bandwidth-unit") as HTMLSelectElement).value;
      const px = p.pixelBandwidth as number, total = px * p.matrix.read;
      // EPI: the shift of one line (alternate lines move by ± this; no net shift), as the bandwidth's "px" entry means
      const rd = (last.fatShift as any).predicted.readout;
      const fat = (rd.perLinePx ?? rd.px) as number;
      el.value = u === "Hz/px" ? num(px) : u === "kHz" ? num(total / 1e3) : u === "±kHz" ? num(total / 2e3) : num(Math.abs(fat));
    } else el.value = c.from(p);
  }
}

/** Shows a number; `key` is its report.json key and `unit` the unit it is shown in (report.json holds SI: the page test converts). */
function setText(el: HTMLElement, text: string, key?: string, unit?: string): void {
  el.textContent = text;
  if (key) el.dataset.key = key;
  if (unit !== undefined) el.dataset.unit = unit;
}

function grey(canvas: HTMLCanvasElement, values: Float64Array, w: number, h: number, log: boolean): void {
  canvas.width = w;
  canvas.height = h;
  const ctx = canvas.getContext("2d")!;
  const img = ctx.createImageData(w, h);
  const v = log ? values.map((x) => Math.log1p(x)) : values;
  const sorted = Float64Array.from(v).sort();
  const top = sorted[Math.min(sorted.length - 1, Math.floor(0.995 * sorted.length))]! || 1;
  for (let i = 0; i < v.length; i++) {
    const g = Math.max(0, Math.min(255, Math.round((255 * v[i]!) / top)));
    img.data[4 * i] = img.data[4 * i + 1] = img.data[4 * i + 2] = g;
    img.data[4 * i + 3] = 255;
  }
  ctx.putImageData(img, 0, 0);
}

let shownImage: { values: Float64Array; width: number; height: number } | null = null;

function drawOverlays(): void {
  const svg = $("overlay") as unknown as SVGSVGElement;
  svg.innerHTML = "";
  if (!last || !shownImage) return;
  const { width: W, height: H } = shownImage;
  svg.setAttribute("viewBox", `0 0 ${W} ${H}`);
  svg.setAttribute("preserveAspectRatio", "none");
  const t = last.display;
  const p = last.protocol;
  const g = { nRead: last.nRead, nPhase: last.nPhase, dRead: p.fov.read / p.matrix.read, dPhase: p.fov.phase / p.matrix.phase };
  const add = (tag: string, attrs: Record<string, string | number>, id: string) => {
    const e = document.createElementNS("http://www.w3.org/2000/svg", tag);
    for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, String(v));
    e.setAttribute("data-overlay", id);
    e.setAttribute("vector-effect", "non-scaling-stroke");
    svg.append(e);
  };
  if (($("o-fov") as HTMLInputElement).checked) add("rect", { x: 0.5, y: 0.5, width: W - 1, height: H - 1, fill: "none", stroke: "#39c", "stroke-width": 2 }, "fov");
  if (($("o-roi") as HTMLInputElement).checked) add("rect", { x: W / 4, y: H / 4, width: W / 2, height: H / 2, fill: "none", stroke: "#fc3", "stroke-width": 1.5, "stroke-dasharray": "4 3" }, "roi");
  const wrap = last.check?.wrap.phase;
  if (($("o-fold") as HTMLInputElement).checked && wrap) {
    for (const f of wrap.folded) {
      if (!f.landsPx) continue;
      // landsPx: first and last phase index of the displayed image that the folded signal covers
      const a = f.landsPx[0], b = f.landsPx[1] + 1;
      const phaseIsHorizontal = t.horizontal === "phase";
      const n = last.nPhase;
      const flip = phaseIsHorizontal ? t.flipCols : t.flipRows;
      const [s0, s1] = flip ? [n - b, n - a] : [a, b];
      if (phaseIsHorizontal) add("rect", { x: s0, y: 0, width: s1 - s0, height: H, fill: "rgba(255,64,160,0.25)", stroke: "#f4a", "stroke-width": 1 }, "fold");
      else add("rect", { x: 0, y: s0, width: W, height: s1 - s0, fill: "rgba(255,64,160,0.25)", stroke: "#f4a", "stroke-width": 1 }, "fold");
    }
  }
  const fs = (last.fatShift as any).predicted;
  if (($("o-fat") as HTMLInputElement).checked && (fs.readout.px !== 0 || fs.phase.px !== 0)) {
    const a = displayPoint(t, g, 0, 0);
    const b = displayPoint(t, g, fs.readout.px * g.dRead, fs.phase.px * g.dPhase);
    add("line", { x1: a.x, y1: a.y, x2: b.x, y2: b.y, stroke: "#f80", "stroke-width": 3 }, "fat");
    add("circle", { cx: b.x, cy: b.y, r: Math.max(0.8, W / 80), fill: "#f80" }, "fat");
  }
}

function drawProfile(): void {
  const svg = $("profile") as unknown as SVGSVGElement;
  if (!shownImage) return;
  const { values, width, height } = shownImage;
  const slider = $("c-row") as HTMLInputElement;
  slider.max = String(height - 1);
  const r = Math.min(height - 1, Number(slider.value));
  $("row-text").textContent = `${r} of ${height} (${last?.display.letters.left ?? ""}→${last?.display.letters.right ?? ""})`;
  let max = 0;
  for (let c = 0; c < width; c++) max = Math.max(max, values[r * width + c]!);
  const pts: string[] = [];
  for (let c = 0; c < width; c++) pts.push(`${(10 + (280 * c) / Math.max(1, width - 1)).toFixed(1)},${(150 - (140 * values[r * width + c]!) / (max || 1)).toFixed(1)}`);
  svg.innerHTML = `<polyline fill="none" stroke="#246" stroke-width="1.5" points="${pts.join(" ")}"/><text x="10" y="12" font-size="10">max ${num(max)}</text>`;
}

function numbersTable(o: RunOutput): void {
  const p = o.protocol as unknown as Record<string, any>;
  const d = o.derived as Record<string, any>;
  const fs = (o.fatShift as any).predicted;
  const rows: [string, number, string, string][] = [
    ["pixel bandwidth", p.pixelBandwidth, "Hz/px", "protocol.pixelBandwidth"],
    ["total bandwidth", (d.totalBandwidth?.value ?? NaN) / 1e3, "kHz", "sequence.derived.totalBandwidth.value"],
    ["half bandwidth (±)", (d.halfBandwidth?.value ?? NaN) / 1e3, "kHz", "sequence.derived.halfBandwidth.value"],
    ["fat–water shift along read", fs.readout.px, "px", "fatShift.predicted.readout.px"],
    ["fat–water shift along read", fs.readout.mm, "mm", "fatShift.predicted.readout.mm"],
    ...(fs.readout.perLinePx !== undefined
      ? [["fat–water shift along read of alternate lines (±, EPI: no net shift)", fs.readout.perLinePx, "px", "fatShift.predicted.readout.perLinePx"] as [string, number, string, string]]
      : []),
    ["fat–water shift along phase", fs.phase.px, "px", "fatShift.predicted.phase.px"],
    [fs.slice.refocusedMm !== undefined ? "fat–water shift through the slice, excited slab" : "fat–water shift through the slice", fs.slice.mm, "mm", "fatShift.predicted.slice.mm"],
    ...(fs.slice.refocusedMm !== undefined
      ? [["fat–water shift through the slice, refocused slab (spin echo)", fs.slice.refocusedMm, "mm", "fatShift.predicted.slice.refocusedMm"] as [string, number, string, string]]
      : []),
    ["fat frequency offset", (o.fatShift as any).fatHz, "Hz", "fatShift.fatHz"],
    ["FOV along read", p.fov.read * 1e3, "mm", "protocol.fov.read"],
    ["FOV along phase", p.fov.phase * 1e3, "mm", "protocol.fov.phase"],
    ["isochromats", o.isochromats, "", "isochromats.count"],
  ];
  const tb = $("numbers").querySelector("tbody")!;
  tb.innerHTML = "";
  for (const [label, v, unit, key] of rows) {
    const tr = document.createElement("tr");
    tr.innerHTML = `<td></td><td></td><td></td>`;
    tr.children[0]!.textContent = label;
    setText(tr.children[1] as HTMLElement, num(v, 4), key, unit);
    tr.children[2]!.textContent = unit;
    tb.append(tr);
  }
  const bw = $("bw-all");
  bw.innerHTML = "";
  const parts: [string, string, string, string, string][] = [
    ["", num(p.pixelBandwidth), "Hz/px", "", "protocol.pixelBandwidth"],
    ["", num(d.totalBandwidth?.value / 1e3), "kHz", " total", "sequence.derived.totalBandwidth.value"],
    ["±", num(d.halfBandwidth?.value / 1e3), "kHz", " half", "sequence.derived.halfBandwidth.value"],
    fs.readout.perLinePx !== undefined
      ? ["", num(fs.readout.perLinePx), "px", " fat shift of alternate lines (±, EPI: no net shift)", "fatShift.predicted.readout.perLinePx"]
      : ["", num(fs.readout.px), "px", " fat shift", "fatShift.predicted.readout.px"],
  ];
  for (const [pre, v, u, what, key] of parts) {
    const s = document.createElement("span");
    setText(s, v, key, u);
    bw.append(pre, s, ` ${u}${what}; `);
  }
}

function checksTable(o: RunOutput): void {
  if (!o.check) return;
  const tb = $("checks").querySelector("tbody")!;
  tb.innerHTML = "";
  for (const it of o.check.items) {
    const tr = document.createElement("tr");
    tr.dataset.check = it.key;
    tr.innerHTML = `<td></td><td></td><td></td><td></td><td></td>`;
    tr.children[0]!.textContent = it.label;
    // keys of report.json's `checks` block (the CLI writes the same lines there)
    setText(tr.children[1] as HTMLElement, it.value === null ? "—" : num(it.value, 4), `checks.${it.key}.value`, it.unit);
    tr.children[2]!.textContent = it.unit;
    const v = tr.children[3] as HTMLElement;
    setText(v, it.verdict, `checks.${it.key}.verdict`);
    v.className = `v-${it.verdict}`;
    tr.children[4]!.textContent = it.reason;
    tb.append(tr);
  }
}

/** Wall-clock milliseconds comparable with the workers' stamps. */
const wall = (): number => performance.timeOrigin + performance.now();

/**
 * Shows a result: the image with its overlays first (that paint is what the
 * latency measures), then — after the frame — k-space, profile, numbers,
 * warnings and the controls' values.
 */
function show(o: RunOutput, g: number, stamps: { received: number; started: number; posted: number } | null, executor: string): void {
  const tShow = performance.now();
  const arrived = wall();
  // the refined result of an edit keeps the check that came with its preview
  if (o.quality === "full" && last && !o.check) o.check = last.check;
  last = o;
  for (const e of document.querySelectorAll<HTMLElement>("#settings .error")) e.textContent = "";
  $("general-error").textContent = "";
  const plane = toDisplay(o.display, o.image, o.nRead, o.nPhase);
  shownImage = plane;
  grey($("image") as HTMLCanvasElement, plane.values, plane.width, plane.height, false);
  for (const side of ["top", "bottom", "left", "right"] as const) $(`l-${side}`).textContent = o.display.letters[side];
  drawOverlays();
  const drawMs = performance.now() - tShow;
  (window as any).__preview.shown = g;
  (window as any).__preview.quality = o.quality;
  (window as any).__preview.executor = executor;
  const t0 = editStart.get(g);
  // after the frame that paints the new image: measure, then draw the other views
  requestAnimationFrame(() => setTimeout(() => {
    if (g !== gen && o.quality === "preview") return;
    if (o.quality === "preview" && t0 !== undefined) {
      const ms = performance.now() - t0;
      performance.measure(`edit-to-paint-${g}`, { start: t0, end: t0 + ms });
      const t0Wall = performance.timeOrigin + t0;
      const stages: Record<string, number> = { ...o.timings, draw: drawMs };
      if (stamps) {
        stages["toWorker"] = stamps.received - t0Wall;
        stages["queued"] = stamps.started - stamps.received;
        stages["back"] = arrived - stamps.posted;
      }
      stages["frame"] = ms - (arrived - t0Wall) - drawMs;
      stages["refining"] = editRefining.get(g) ? 1 : 0;
      latencies.push({ gen: g, ms, matrix: o.nRead * o.nPhase, stages });
      const s = [...latencies.slice(-50)].map((l) => l.ms).sort((a, b) => a - b);
      setText($("latency"), `edit → painted image: ${ms.toFixed(0)} ms (median of last ${s.length}: ${s[Math.floor(s.length / 2)]!.toFixed(0)} ms)`);
      (window as any).__preview.painted = g;
    }
    showRest(o, g, executor);
  }, 0));
}

/** A result whose image is painted but whose k-space view and .npy bytes (the worker's "rest" message) have not come yet. */
let pendingRest: { o: RunOutput; g: number; executor: string } | null = null;

/** The views after the image: k-space, profile, numbers, check lines, warnings, controls (once the rest of the result has come). */
function showRest(o: RunOutput, g: number, executor: string): void {
  if (last !== o) return;
  if (!o.kmag) {
    pendingRest = { o, g, executor };
    return;
  }
  pendingRest = null;
  const k = toDisplay(o.display, o.kmag, o.kRead, o.kPhase);
  grey($("kspace") as HTMLCanvasElement, k.values, k.width, k.height, true);
  $("orient").textContent = `${o.display.orientation}; rows ${o.display.rows}, columns ${o.display.cols}`;
  const slider = $("c-row") as HTMLInputElement;
  if (shownImage && Number(slider.max) !== shownImage.height - 1) {
    slider.max = String(shownImage.height - 1);
    slider.value = String(Math.floor(shownImage.height / 2));
  }
  drawProfile();
  numbersTable(o);
  if (o.check) checksTable(o);
  else $("checks").querySelector("tbody")!.innerHTML = `<tr><td colspan="5">checking…</td></tr>`;
  const w = $("warnings");
  w.innerHTML = "";
  for (const s of [...o.warnings, `simulated: ${o.slicesRun}`]) {
    const li = document.createElement("li");
    li.textContent = s;
    w.append(li);
  }
  syncControls();
  $("quality").textContent = o.quality === "preview" ? "preview quality (density 1, 3 through-slice isochromats, no T2′ spread: T2′ in closed form at a gradient echo where it matters, else left out)" : "default quality";
  $("status").textContent = `${o.quality === "preview" ? "preview" : "refined"}: ${o.isochromats} isochromats, ${o.readout} readout operator, ${executor}, ${o.ranOn ? `chunks on ${o.ranOn}` : "no chunk run (the fast operator streamed the cells)"}, kernels ${o.kernels}${o.reused.length ? `; kept from an earlier edit: ${o.reused.join(", ")}` : ""}; in the worker: ${Object.entries(o.timings).map(([k, v]) => `${k} ${v.toFixed(0)} ms`).join(", ")}`;
  if (o.quality === "full") {
    $("progress-wrap").hidden = true;
    (window as any).__preview.refined = g;
  }
}

function showError(m: { gen: number; message: string; key: string | null }): void {
  const key = m.key ?? "";
  const ctrl = CONTROLS.find((c) => key === c.key || key.startsWith(`${c.key}.`)) ?? CONTROLS.find((c) => key && c.key.startsWith(`${key}.`));
  const byMessage = CONTROLS.find((c) => m.message.includes(`--set ${c.key}`) || m.message.includes(`: ${c.key}:`));
  const c = ctrl ?? byMessage;
  for (const e of document.querySelectorAll<HTMLElement>("#settings .error")) e.textContent = "";
  $("general-error").textContent = "";
  if (c) $(`e-${c.key.replace(/\./g, "-")}`).textContent = m.message;
  else $("general-error").textContent = m.message;
  $("status").textContent = "the last valid image stays on screen";
  (window as any).__preview.error = { gen: m.gen, message: m.message, key: c?.key ?? null };
}

function download(name: string, blob: Blob): void {
  const a = document.createElement("a");
  a.href = URL.createObjectURL(blob);
  a.download = name;
  document.body.append(a);
  a.click();
  setTimeout(() => { URL.revokeObjectURL(a.href); a.remove(); }, 1000);
}

async function main(): Promise<void> {
  const cfg = (await (await fetch("config.json")).json()) as Config;
  $("safety").textContent = cfg.safety;
  const fetchText = async (u: string) => (await fetch(u)).text();
  const presets: Record<string, string> = {}, phantoms: Record<string, string> = {};
  await Promise.all([
    ...cfg.presets.map(async (n) => { presets[n] = await fetchText(`presets/${n}.json`); }),
    ...cfg.phantoms.map(async (n) => { phantoms[n] = await fetchText(`phantoms/${n}.json`); }),
  ]);
  let sab: SharedArrayBuffer | undefined;
  if (typeof SharedArrayBuffer !== "undefined" && crossOriginIsolated) {
    sab = new SharedArrayBuffer(4);
    shared = new Int32Array(sab);
  }
  // field maps of bundled phantoms: fetched from the server's phantoms folder (paths relative to it)
  await Promise.all(Object.values(phantoms).map(async (text) => {
    const file = (() => { try { return JSON.parse(text)?.b0?.fieldMap?.file; } catch { return undefined; } })();
    if (typeof file !== "string") return;
    const r = await fetch(`phantoms/${file.split("/").map(encodeURIComponent).join("/")}`);
    if (!r.ok) return; // the phantom's validator then says the map is not bundled
    const bytes = new Uint8Array(await r.arrayBuffer());
    const m = { t: "array", name: file.replace(/^\.\//, ""), bytes, bundled: true };
    worker.postMessage(m);
    toRefiner(m);
  }));
  const addInput = (name: string, text: string) => {
    const m = { t: "input", name: name.replace(/[^A-Za-z0-9._-]/g, "_"), text };
    worker.postMessage(m);
    toRefiner(m);
  };
  if (cfg.given.protocol) addInput(cfg.given.protocol.name.slice(5), JSON.stringify(cfg.given.protocol.object));
  if (cfg.given.phantom) addInput(cfg.given.phantom.name.slice(5), JSON.stringify(cfg.given.phantom.object));
  // the field map of the phantom named on the command line, as its b0.fieldMap.file names it
  for (const mp of cfg.given.maps ?? []) {
    const m = { t: "array", name: mp.name, bytes: new Uint8Array(await (await fetch(mp.url)).arrayBuffer()), bundled: false };
    worker.postMessage(m);
    toRefiner(m);
  }
  // init last: the worker's "ready" starts the first run, and no await lies between here and the message handlers being set
  // engine workers: an edit at preview quality is one chunk up to about 180² (two at 256²), run on as many engine workers as
  // there are cores (up to 4); the refinement (a worker made when it starts) on all but one
  const hc = navigator.hardwareConcurrency || 2;
  toRefiner({ t: "init", presets, phantoms, gen: sab, engineWorkers: Math.max(1, Math.min(4, hc - 1)) });
  worker.postMessage({ t: "init", presets, phantoms, gen: sab, engineWorkers: Math.max(1, Math.min(4, hc)) });
  readUrl(cfg);
  $("controls").addEventListener("submit", (e) => e.preventDefault());
  const pSel = $("c-protocol") as HTMLSelectElement, phSel = $("c-phantom") as HTMLSelectElement;
  for (const n of cfg.presets) pSel.append(new Option(n, n));
  if (cfg.given.protocol) pSel.append(new Option(cfg.given.protocol.name, cfg.given.protocol.name));
  for (const n of cfg.phantoms) phSel.append(new Option(n, n));
  if (cfg.given.phantom) phSel.append(new Option(cfg.given.phantom.name, cfg.given.phantom.name));
  pSel.value = state.protocol;
  phSel.value = state.phantom;
  buildControls();
  const fatRow = document.createElement("div");
  fatRow.className = "row";
  fatRow.innerHTML = `<label for="c-fat">fat model</label><select id="c-fat"><option value="multi">six peaks</option><option value="single">one peak (−3.4 ppm)</option></select>`;
  $("settings").append(fatRow);
  ($("c-fat") as HTMLSelectElement).value = state.fat;
  $("c-fat").addEventListener("change", (ev) => { state.fat = ($("c-fat") as HTMLSelectElement).value as "single" | "multi"; run(ev.timeStamp); });
  // a linear B0 term added to the phantom's B0 model (through its b0 expression: engine.ts withLinearB0)
  for (const [i, axis] of (["x", "y", "z"] as const).entries()) {
    const row = document.createElement("div");
    row.className = "row";
    row.innerHTML = `<label for="c-b0-${axis}">B0 linear term along ${axis}</label><input id="c-b0-${axis}" type="number" step="1"><span class="unit">Hz/cm</span><div class="error" id="e-b0-${axis}" role="alert"></div>`;
    $("settings").append(row);
    const input = $(`c-b0-${axis}`) as HTMLInputElement;
    input.value = String(state.b0[i]);
    input.addEventListener("change", (ev) => {
      const v = Number(input.value);
      if (input.value.trim() === "" || !Number.isFinite(v)) { $(`e-b0-${axis}`).textContent = "a number in Hz/cm, e.g. 10"; return; }
      $(`e-b0-${axis}`).textContent = "";
      state.b0[i] = v;
      run(ev.timeStamp);
    });
  }
  pSel.addEventListener("change", (ev) => { state.protocol = pSel.value; state.sets.clear(); run(ev.timeStamp); });
  phSel.addEventListener("change", (ev) => { state.phantom = phSel.value; run(ev.timeStamp); });
  $("reset").addEventListener("click", (ev) => {
    state.sets.clear();
    state.b0 = [0, 0, 0];
    for (const a of ["x", "y", "z"]) ($(`c-b0-${a}`) as HTMLInputElement).value = "0";
    run(ev.timeStamp);
  });
  for (const id of ["o-fov", "o-fold", "o-fat", "o-roi"]) $(id).addEventListener("change", drawOverlays);
  $("c-row").addEventListener("input", drawProfile);
  const takeFile = async (f: File, t0: number) => {
    const text = await f.text();
    let obj: any;
    try { obj = JSON.parse(text); } catch { $("general-error").textContent = `${f.name}: not JSON`; return; }
    const name = `file:${f.name.replace(/[^A-Za-z0-9._-]/g, "_")}`;
    addInput(name.slice(5), text);
    // a phantom has shapes; anything else is read as a protocol (the validators say what is wrong)
    const sel = obj && Array.isArray(obj.shapes) ? phSel : pSel;
    if (![...sel.options].some((o) => o.value === name)) sel.append(new Option(name, name));
    sel.value = name;
    if (sel === phSel) state.phantom = name;
    else { state.protocol = name; state.sets.clear(); fileProtocols.set(name, obj); }
    run(t0);
  };
  // several files at once: .npy field maps first (under their own names, as a phantom's b0.fieldMap.file names them), then the JSON
  const takeFiles = async (list: FileList | null | undefined, t0: number) => {
    const files = [...(list ?? [])];
    for (const f of files.filter((x) => x.name.toLowerCase().endsWith(".npy"))) {
      const bytes = new Uint8Array(await f.arrayBuffer());
      const m = { t: "array", name: f.name, bytes, bundled: false };
      worker.postMessage(m);
      toRefiner(m);
    }
    const json = files.find((x) => !x.name.toLowerCase().endsWith(".npy"));
    if (json) await takeFile(json, t0);
    else if (files.length) run(t0);
  };
  $("c-file").addEventListener("change", (ev) => void takeFiles(($("c-file") as HTMLInputElement).files, ev.timeStamp));
  const drop = $("drop");
  drop.addEventListener("keydown", (e) => { if (e.key === "Enter" || e.key === " ") { e.preventDefault(); $("c-file").click(); } });
  drop.addEventListener("dragover", (e) => { e.preventDefault(); drop.classList.add("over"); });
  drop.addEventListener("dragleave", () => drop.classList.remove("over"));
  drop.addEventListener("drop", (e) => { e.preventDefault(); drop.classList.remove("over"); void takeFiles(e.dataTransfer?.files, e.timeStamp); });
  document.addEventListener("dragover", (e) => e.preventDefault());
  document.addEventListener("drop", (e) => { if (e.target !== drop) { e.preventDefault(); void takeFiles(e.dataTransfer?.files, e.timeStamp); } });

  $("x-protocol").addEventListener("click", () => {
    const base = state.protocol.startsWith("file:") ? null : state.protocol;
    const over: Record<string, any> = base ? { extend: base } : structuredClone(fileProtocols.get(state.protocol) ?? {});
    for (const [k, v] of state.sets) {
      const path = k.split(".");
      let cur = over;
      for (const p of path.slice(0, -1)) cur = cur[p] = typeof cur[p] === "object" && cur[p] ? { ...cur[p] } : {};
      let val: unknown;
      try { val = JSON.parse(v); } catch { val = v.replace(/^["']|["']$/g, ""); }
      cur[path[path.length - 1]!] = val;
    }
    download("protocol.json", new Blob([JSON.stringify(over, null, 2) + "\n"], { type: "application/json" }));
  });
  // like every PNG of isofold, the exported image says in a tEXt chunk that it is simulated
  $("x-png").addEventListener("click", () => ($("image") as HTMLCanvasElement).toBlob(async (b) => {
    if (!b) return;
    const bytes = insertTextChunks(new Uint8Array(await b.arrayBuffer()), { Description: SIMULATED_NOTE, Software: "isofold previewer" });
    download("image.png", new Blob([bytes as BlobPart], { type: "image/png" }));
  }, "image/png"));
  $("x-kspace").addEventListener("click", () => last?.kspaceNpy && download("kspace.npy", new Blob([last.kspaceNpy as BlobPart])));
  $("x-image").addEventListener("click", () => last?.imageNpy && download("image.npy", new Blob([last.imageNpy as BlobPart])));

  const onMessage = (ev: MessageEvent) => {
    const m = ev.data;
    if (m.t === "ready") {
      if (ev.target === worker) run(performance.now());
      return;
    }
    if (ev.target === refiner && (m.t === "result" || m.t === "error" || m.t === "cancelled")) refining = false;
    if (m.gen !== gen) return;
    if (m.t === "rest") {
      // the k-space view and the .npy bytes of the result just shown
      if (last && last.quality === m.quality && !last.kmag) {
        const { packMs, ...rest } = m.rest as { packMs: number; kmag: Float64Array; kspaceNpy: Uint8Array; imageNpy: Uint8Array };
        Object.assign(last, rest);
        // the k-space bytes of the newest preview-quality result, for the tests (a reference: nothing is copied)
        if (m.quality === "preview") Object.assign((window as any).__preview, { previewKspace: rest.kspaceNpy, previewGen: m.gen });
        last.timings["packAfterPaint"] = packMs;
        if (pendingRest?.o === last) showRest(last, pendingRest.g, pendingRest.executor);
      }
      return;
    }
    if (m.t === "result") {
      if (m.cache && ev.target === worker) (window as any).__preview.cache = m.cache;
      show(m.out as RunOutput, m.gen, m.stamps ?? null, m.executor ?? "");
      if (ev.target === worker && lastReq) {
        const req = { ...lastReq, quality: "full" }, g = m.gen as number;
        if (refineTimer !== null) clearTimeout(refineTimer);
        refineTimer = setTimeout(() => {
          refineTimer = null;
          if (g !== gen) return;
          refiner ??= makeRefiner();
          refiner.postMessage({ t: "run", gen: g, req });
          refining = true;
          // indeterminate until the refining worker reports chunks (the fast readout reports none until it is done)
          $("progress-wrap").hidden = false;
          $("progress").removeAttribute("value");
        }, REFINE_DELAY_MS);
      }
    }
    else if (m.t === "check" && last && m.check) {
      last.check = m.check;
      checksTable(last);
      drawOverlays();
      (window as any).__preview.checked = m.gen;
    }
    else if (m.t === "error") { if (m.quality === "preview") showError(m); else $("progress-wrap").hidden = true; }
    else if (m.t === "progress") {
      $("progress-wrap").hidden = false;
      ($("progress") as HTMLProgressElement).value = m.done / m.total;
    }
  };
  worker.onmessage = onMessage;
  onWorkerMessage = onMessage;
}

void main();
