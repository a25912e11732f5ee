/**
 * The report page of one simulate run, from plain data: report.json's
 * content, the display transform and the pictures already in display order.
 */
import { displayPoint, type DisplayTransform } from "./display.js";
import { fmt, renderReportHtml, type CheckItem, type ComparisonRow, type Overlay, type ReportPage, type TableRow } from "./html.js";
import { lineSpec, vegaLiteSvg } from "./plots.js";

export interface LogicalRect {
  label?: string;
  /** Extent along read and phase (m), in the image frame (index n of N at (n − ⌊N/2⌋)·Δ). */
  read: [number, number];
  phase: [number, number];
}

export interface RunReportInput {
  report: Record<string, unknown>;
  display: DisplayTransform;
  /** Magnitude picture in display order (values for profiles) and its PNG. */
  image: { png: Uint8Array; values: Float64Array; width: number; height: number };
  kspace: { png: Uint8Array; width: number; height: number };
  /** The image grid along the logical axes: points and spacing (m). */
  grid: { nRead: number; nPhase: number; dRead: number; dPhase: number };
  /** Fat-fraction-weighted centre of the fat in the slice (m along read, phase), for the fat-shift arrow. */
  fatCentroid?: { u: number; v: number } | null;
  /** Region of interest; default the central half of the FOV along both axes. */
  roi?: LogicalRect;
  /** Where folded signal lands, when something computed it (e.g. a check). */
  folds?: LogicalRect[];
  checks?: CheckItem[];
  /** The profile plots when they are already under way ({@link profilePlots}, e.g. on another thread); default made here. */
  plots?: Promise<{ title: string; svg: string }[]>;
}

/** Renders vega-lite specifications to SVG strings, in order. */
export type PlotRenderer = (specs: Record<string, unknown>[]) => Promise<string[]>;

/** The default {@link PlotRenderer}: vega on this thread, one plot after another. */
export async function renderPlots(specs: Record<string, unknown>[]): Promise<string[]> {
  const out: string[] = [];
  for (const spec of specs) out.push(await vegaLiteSvg(spec));
  return out;
}

type Obj = Record<string, unknown>;
const obj = (v: unknown): Obj => (v && typeof v === "object" ? (v as Obj) : {});
const num = (v: unknown): number | null => (typeof v === "number" && Number.isFinite(v) ? v : null);

/** The default ROI: the central half of the FOV along read and phase. */
export function defaultRoi(grid: RunReportInput["grid"]): LogicalRect {
  const fr = grid.nRead * grid.dRead, fp = grid.nPhase * grid.dPhase;
  return { label: "ROI (central half of the FOV)", read: [-fr / 4, fr / 4], phase: [-fp / 4, fp / 4] };
}

/** A logical rectangle as a display rectangle (pixel units). */
export function rectToDisplay(t: DisplayTransform, grid: RunReportInput["grid"], r: LogicalRect): { x: number; y: number; w: number; h: number } {
  // the extents are physical edges; displayPoint maps a position to the continuous pixel coordinate
  const a = displayPoint(t, grid, r.read[0], r.phase[0]);
  const b = displayPoint(t, grid, r.read[1], r.phase[1]);
  return { x: Math.min(a.x, b.x), y: Math.min(a.y, b.y), w: Math.abs(a.x - b.x), h: Math.abs(a.y - b.y) };
}

function protocolRows(p: Obj): TableRow[] {
  const rows: TableRow[] = [];
  const add = (label: string, v: unknown, unit = "", scale = 1, key?: string) => {
    const n = num(v);
    if (n === null && (v === undefined || v === null)) return;
    rows.push({ label, value: n === null ? String(v) : fmt(n * scale), unit, key });
  };
  const fov = obj(p.fov), matrix = obj(p.matrix), slice = obj(p.slice), os = obj(p.oversampling), pf = obj(p.partialFourier), hw = obj(p.hardware);
  add("sequence", p.sequence);
  add("main field", p.field, "T", 1, "protocol.field");
  add("FOV along read", fov.read, "mm", 1e3, "protocol.fov.read");
  add("FOV along phase", fov.phase, "mm", 1e3, "protocol.fov.phase");
  add("matrix read × phase", `${matrix.read} × ${matrix.phase}${num(matrix.slice) && (matrix.slice as number) > 1 ? ` × ${matrix.slice}` : ""}`, "px");
  add("slice thickness", slice.thickness, "mm", 1e3);
  add("slice position", slice.position, "mm", 1e3);
  add("orientation", slice.orientation);
  if (num(slice.angle)) add("oblique tilt", slice.angle, "deg", 180 / Math.PI);
  add("phase-encoding direction (physical axis)", p.phaseDirection);
  add("bandwidth per pixel", p.pixelBandwidth, "Hz/px", 1, "protocol.pixelBandwidth");
  add("TE", p.te, "ms", 1e3);
  add("TR", p.tr, "ms", 1e3);
  add("flip angle", p.flip, "deg", 180 / Math.PI);
  add("read oversampling", os.read, "×");
  add("phase oversampling", os.phase, "fraction");
  add("receiver filter", p.receiverFilter === false ? "off (readout may wrap)" : "on");
  add("partial Fourier, phase", pf.phase, "fraction");
  add("averages", p.averages);
  add("gradient limit", hw.gmax, "mT/m", 1e3);
  add("slew limit", hw.slew, "T/m/s");
  return rows;
}

function derivedRows(d: Obj): TableRow[] {
  return Object.entries(d).map(([k, raw]) => {
    const e = obj(raw);
    const n = num(e.value);
    return { key: `derived.${k}`, label: k, value: n === null ? String(e.value ?? "") : fmt(n), unit: String(e.unit ?? ""), note: e.note === undefined ? "" : String(e.note) };
  });
}

function comparisonRows(fat: Obj): ComparisonRow[] {
  const pred = obj(fat.predicted), meas = obj(fat.measured);
  const rows: ComparisonRow[] = [];
  for (const axis of ["readout", "phase"] as const) {
    const p = obj(pred[axis]), m = obj(meas[axis]);
    const pPx = num(p.px), mPx = num(m.px);
    if (axis === "phase" && !pPx && mPx === null) continue;
    const names: Record<string, string> = { "+x": "the patient's right", "-x": "the patient's left", "+y": "anterior", "-y": "posterior", "+z": "superior", "-z": "inferior" };
    const perLine = num(p.perLinePx);
    const dir = axis === "readout" && perLine !== null
      ? `EPI: the read gradient alternates, so alternate lines move by ±${fmt(Math.abs(perLine))} px and there is no net shift (their difference is a ghost at half the FOV along phase)`
      : typeof p.direction === "string" && names[p.direction] ? `fat moves toward ${p.direction} (${names[p.direction]}); sign along the positive ${axis === "readout" ? "read" : "phase"} axis` : "";
    rows.push({ key: `fatShift.${axis}.px`, label: `fat shift along ${axis === "readout" ? "read" : "phase"}`, unit: "px", predicted: pPx, measured: mPx, note: dir });
    rows.push({ key: `fatShift.${axis}.mm`, label: `fat shift along ${axis === "readout" ? "read" : "phase"}`, unit: "mm", predicted: num(p.mm), measured: num(m.mm) });
  }
  const sl = obj(pred.slice);
  if (num(sl.mm) !== null) {
    const spinEcho = num(sl.refocusedMm) !== null;
    rows.push({ key: "fatShift.slice.mm", label: spinEcho ? "fat shift along the slice normal, excited slab" : "fat shift along the slice normal", unit: "mm", predicted: num(sl.mm), measured: null, note: "predicted only: a 2D image cannot show it" });
    if (spinEcho) rows.push({ key: "fatShift.slice.refocusedMm", label: "fat shift along the slice normal, refocused slab", unit: "mm", predicted: num(sl.refocusedMm), measured: null, note: "spin echo: the refocusing pulse's own gradient; fat signal comes from where the two slabs overlap" });
  }
  return rows;
}

/** Builds the page data (async: the plots are rendered by vega). */
export async function runReportPage(r: RunReportInput): Promise<ReportPage> {
  const rep = r.report;
  const t = r.display;
  const g = r.grid;
  const pxX = (t.transpose ? g.dPhase : g.dRead) * 1e3, pxY = (t.transpose ? g.dRead : g.dPhase) * 1e3;
  const W = r.image.width, H = r.image.height;
  const plots = await (r.plots ?? profilePlots(t, g, r.image));

  const protocol = obj(rep.protocol);
  const fat = obj(rep.fatShift);
  const fov = obj(protocol.fov);
  const overlays: Overlay[] = [];
  overlays.push({
    id: "fov", label: "FOV", colour: "#39c", on: true,
    shapes: [{ kind: "rect", x: 0, y: 0, w: W, h: H, label: `FOV ${fmt((num(fov.read) ?? 0) * 1e3)} × ${fmt((num(fov.phase) ?? 0) * 1e3)} mm (read × phase)` }],
  });
  const roi = r.roi ?? defaultRoi(g);
  overlays.push({ id: "roi", label: roi.label ?? "ROI", colour: "#fc3", on: true, shapes: [{ kind: "rect", ...rectToDisplay(t, g, roi), dashed: true, label: "ROI" }] });
  overlays.push(r.folds && r.folds.length
    ? { id: "fold", label: "where folded signal lands", colour: "#f4a", on: true, shapes: r.folds.map((f) => ({ kind: "rect" as const, ...rectToDisplay(t, g, f), label: f.label })) }
    : { id: "fold", label: "where folded signal lands", colour: "#f4a", on: false, shapes: [], unavailable: "this report holds no wrap prediction" });
  const pr = obj(obj(fat.predicted).readout), pp = obj(obj(fat.predicted).phase);
  const sr = num(pr.px) ?? 0, sp = num(pp.px) ?? 0;
  if (r.fatCentroid && (sr !== 0 || sp !== 0)) {
    const a = displayPoint(t, g, r.fatCentroid.u, r.fatCentroid.v);
    const b = displayPoint(t, g, r.fatCentroid.u + sr * g.dRead, r.fatCentroid.v + sp * g.dPhase);
    const len = Math.hypot(sr, sp);
    overlays.push({
      id: "fat", label: "fat shift (predicted)", colour: "#f80", on: true,
      shapes: [{ kind: "arrow", x1: a.x, y1: a.y, x2: b.x, y2: b.y, label: `fat ${fmt(len, 3)} px` }],
    });
  } else {
    overlays.push({ id: "fat", label: "fat shift (predicted)", colour: "#f80", on: false, shapes: [], unavailable: r.fatCentroid ? "no predicted shift" : "no fat in the slice" });
  }

  const derived = obj(obj(rep.sequence).derived);
  const display = obj(rep.display);
  const tool = obj(rep.tool);
  const iso = obj(rep.isochromats);
  const runRows: TableRow[] = [
    { label: "tool", value: `${tool.name ?? "isofold"} ${tool.version ?? ""}` },
    { label: "created", value: String(rep.created ?? "") },
    { label: "phantom", value: String(obj(rep.inputs).phantom ?? "") },
    { label: "protocol", value: String(obj(rep.inputs).protocol ?? "") },
    { label: "seed", value: String(rep.seed ?? "") },
    { label: "isochromats", value: fmt(num(iso.count)), unit: "" },
    { label: "T2′ (T2* below T2)", value: t2primeText(iso.t2primeSpread) },
    { label: "simulation time", value: fmt(num(rep.timingSeconds)), unit: "s" },
    { label: "display convention", value: String(display.convention ?? "") },
    { label: "display rows (top → bottom)", value: String(display.rows ?? ""), key: "display.rows" },
    { label: "display columns (left → right)", value: String(display.cols ?? ""), key: "display.cols" },
  ];
  const kLetters = { left: `−k ${t.horizontal}`, right: `+k ${t.horizontal}`, top: `−k ${t.vertical}`, bottom: `+k ${t.vertical}` };
  if (t.flipCols) [kLetters.left, kLetters.right] = [kLetters.right, kLetters.left];
  if (t.flipRows) [kLetters.top, kLetters.bottom] = [kLetters.bottom, kLetters.top];
  return {
    title: `isofold simulation: ${protocol.sequence ?? "?"} of ${String(obj(rep.inputs).phantom ?? "").split("/").pop()}`,
    subtitle: "A simulated image computed from a numeric phantom by Bloch simulation of spin isochromats; not a scan.",
    safety: String(rep.safety ?? ""),
    checks: r.checks,
    comparisons: comparisonRows(fat),
    comparisonNote: typeof fat.note === "string" ? fat.note : undefined,
    images: [
      {
        id: "image", title: "Magnitude image", png: r.image.png, width: W, height: H, pixelMm: { x: pxX, y: pxY },
        letters: t.letters, overlays, scaleBar: true,
        caption: `Display window 0 … 99.5th percentile. Horizontal: ${t.horizontal} axis, vertical: ${t.vertical} axis. Each pixel is ${fmt(pxX)} × ${fmt(pxY)} mm.`,
      },
      {
        id: "kspace", title: "k-space, log magnitude", png: r.kspace.png, width: r.kspace.width, height: r.kspace.height, pixelMm: { x: pxX, y: pxY },
        letters: kLetters, overlays: [], scaleBar: false,
        caption: "log10(1 + |s|/(10⁻³·max|s|)), turned like the image; read oversampling kept.",
      },
    ],
    displayNote: `Pictures follow the ${String(display.convention ?? t.convention)} convention; the edge letters are the DICOM patient-orientation letters. The .npy and NIfTI arrays keep their index order.`,
    plots,
    warnings: Array.isArray(rep.warnings) ? rep.warnings.map(String) : [],
    tables: [
      { id: "protocol", title: "Protocol", rows: protocolRows(protocol) },
      { id: "derived", title: "Derived from the protocol", rows: derivedRows(derived) },
      { id: "run", title: "Run", rows: runRows },
    ],
    footer: "Made by isofold. Self-contained page: images inline, plots rendered by vega from vega-lite specifications, no network.",
  };
}

/**
 * The page's two profile plots (the display row and column holding the most
 * signal) of the magnitude picture in display order, rendered by `render`.
 */
export async function profilePlots(
  t: DisplayTransform, g: RunReportInput["grid"], image: { values: Float64Array; width: number; height: number }, render: PlotRenderer = renderPlots,
): Promise<{ title: string; svg: string }[]> {
  const pxX = (t.transpose ? g.dPhase : g.dRead) * 1e3, pxY = (t.transpose ? g.dRead : g.dPhase) * 1e3;
  const W = image.width, H = image.height;
  const centre = displayPoint(t, g, 0, 0); // pixel centre of index ⌊N/2⌋: (x, y) = (col + 0.5, row + 0.5)
  // profiles through the row and the column that hold the most signal (the centre may fall between objects)
  const rowSum = new Float64Array(H), colSum = new Float64Array(W);
  for (let y = 0; y < H; y++) for (let x = 0; x < W; x++) {
    const v = image.values[y * W + x]!;
    rowSum[y]! += v;
    colSum[x]! += v;
  }
  const argmax = (a: Float64Array, dflt: number) => {
    let k = dflt;
    for (let i = 0; i < a.length; i++) if (a[i]! > a[k]!) k = i;
    return k;
  };
  const row0 = argmax(rowSum, Math.min(H - 1, Math.floor(centre.y))), col0 = argmax(colSum, Math.min(W - 1, Math.floor(centre.x)));
  const rowSeries = Array.from({ length: W }, (_, c) => ({ x: (c + 0.5 - centre.x) * pxX, y: image.values[row0 * W + c]! }));
  const colSeries = Array.from({ length: H }, (_, y) => ({ x: (y + 0.5 - centre.y) * pxY, y: image.values[y * W + col0]! }));
  const rowMm = (row0 + 0.5 - centre.y) * pxY, colMm = (col0 + 0.5 - centre.x) * pxX;
  const svgs = await render([
    lineSpec({
      title: `Horizontal profile: display row ${row0} (${fmt(rowMm, 3)} mm from the centre toward ${t.letters.bottom}), the row with most signal`,
      xTitle: `position from the centre (mm), ${t.letters.left} → ${t.letters.right}`,
      yTitle: "magnitude (a.u.)", series: [{ name: "image", points: rowSeries }],
    }),
    lineSpec({
      title: `Vertical profile: display column ${col0} (${fmt(colMm, 3)} mm from the centre toward ${t.letters.right}), the column with most signal`,
      xTitle: `position from the centre (mm), ${t.letters.top} → ${t.letters.bottom}`,
      yTitle: "magnitude (a.u.)", series: [{ name: "image", points: colSeries }],
    }),
  ]);
  return [{ title: "horizontal profile", svg: svgs[0]! }, { title: "vertical profile", svg: svgs[1]! }];
}

/** report.html of one run, as bytes. */
export async function runReportHtml(r: RunReportInput): Promise<Uint8Array> {
  return new TextEncoder().encode(renderReportHtml(await runReportPage(r)));
}

/** How T2′ was modelled, per tissue, in words: "closed form R2* = R2 + R2′: a, b; spread of 16 isochromats: c" ("none" without T2′). */
function t2primeText(spreads: unknown): string {
  if (!Array.isArray(spreads)) return "";
  const closed: string[] = [], spread = new Map<number, string[]>();
  for (const x of spreads as { tissue?: unknown; t2prime?: unknown; isochromats?: unknown; model?: unknown }[]) {
    if (typeof x.t2prime !== "number") continue;
    if (x.model === "closed form") closed.push(String(x.tissue));
    else spread.set(Number(x.isochromats), [...(spread.get(Number(x.isochromats)) ?? []), String(x.tissue)]);
  }
  const parts = [
    ...(closed.length ? [`closed form R2* = R2 + R2′: ${closed.join(", ")}`] : []),
    ...[...spread].map(([n, t]) => (n > 1 ? `spread of ${n} isochromats per voxel: ${t.join(", ")}` : `not modelled (no spread): ${t.join(", ")}`)),
  ];
  return parts.length ? parts.join("; ") : "none (T2* = T2 in every tissue)";
}
