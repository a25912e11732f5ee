/**
 * report.html: one self-contained page built from plain data. Images are
 * data: URLs, plots are inline SVG, the only script is inline (overlay
 * switches); nothing is fetched, so the file works offline.
 */

/** One line of a check: a value, its unit, a verdict against a stated threshold, and why. */
export interface CheckItem {
  key: string;
  label: string;
  value: number | string | null;
  unit: string;
  verdict: "fine" | "watch" | "problem" | string;
  threshold: string;
  reason: string;
}

export interface TableRow {
  label: string;
  value: string;
  unit?: string;
  note?: string;
  /** Stable key for scripts and tests (data-key attribute). */
  key?: string;
}

export interface ComparisonRow {
  label: string;
  unit: string;
  predicted: number | null;
  measured: number | null;
  key?: string;
  note?: string;
}

/** Overlay shapes in display pixel coordinates (pixel i covers [i, i+1)). */
export type OverlayShape =
  | { kind: "rect"; x: number; y: number; w: number; h: number; label?: string; dashed?: boolean }
  | { kind: "arrow"; x1: number; y1: number; x2: number; y2: number; label?: string };

export interface Overlay {
  id: string;
  label: string;
  colour: string;
  shapes: OverlayShape[];
  /** Shown when the page opens. */
  on: boolean;
  /** Why there is nothing to draw (the switch is then disabled). */
  unavailable?: string;
}

export interface ReportImage {
  id: string;
  title: string;
  png: Uint8Array;
  width: number;
  height: number;
  /** Size of one display pixel along columns and rows (mm). */
  pixelMm: { x: number; y: number };
  letters: { left: string; right: string; top: string; bottom: string };
  overlays: Overlay[];
  caption?: string;
  /** Draw a scale bar (false for k-space, whose pixels are not lengths). */
  scaleBar: boolean;
}

export interface ReportPage {
  title: string;
  subtitle: string;
  safety: string;
  /** Verdict lines, first on the page when present. */
  checks?: CheckItem[];
  comparisons: ComparisonRow[];
  comparisonNote?: string;
  tables: { id: string; title: string; rows: TableRow[] }[];
  images: ReportImage[];
  displayNote: string;
  plots: { title: string; svg: string }[];
  warnings: string[];
  footer: string;
}

export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" })[c]!);
}

/** A number for people: 4 significant digits, no exponent between 1e-3 and 1e6. */
export function fmt(v: number | null | undefined, digits = 4): string {
  if (v === null || v === undefined || !Number.isFinite(v)) return "—";
  if (v === 0) return "0";
  const a = Math.abs(v);
  if (a >= 1e6 || a < 1e-3) return v.toExponential(digits - 1);
  return String(Number(v.toPrecision(digits)));
}

function dataUrl(png: Uint8Array): string {
  return "data:image/png;base64," + Buffer.from(png.buffer, png.byteOffset, png.byteLength).toString("base64");
}

/** Display magnification: at least 4×, and at least 512 px on the longer side. */
export function magnification(width: number, height: number): number {
  return Math.max(4, Math.ceil(512 / Math.max(width, height)));
}

/** A scale-bar length (mm) of 1, 2 or 5 × 10^k, near a quarter of the width. */
export function scaleBarMm(widthMm: number): number {
  const target = widthMm / 4;
  const p = 10 ** Math.floor(Math.log10(target));
  for (const m of [5, 2, 1]) if (m * p <= target) return m * p;
  return p;
}

function shapeSvg(s: OverlayShape, colour: string, zoom: number): string {
  const sw = (1.5 / zoom).toFixed(3);
  const fs = (11 / zoom).toFixed(3);
  const text = (x: number, y: number, t?: string) =>
    t ? `<text x="${x.toFixed(3)}" y="${y.toFixed(3)}" fill="${colour}" font-size="${fs}" font-family="sans-serif" paint-order="stroke" stroke="black" stroke-width="${(2 / zoom).toFixed(3)}">${escapeHtml(t)}</text>` : "";
  if (s.kind === "rect") {
    return `<rect x="${s.x.toFixed(3)}" y="${s.y.toFixed(3)}" width="${s.w.toFixed(3)}" height="${s.h.toFixed(3)}" fill="none" stroke="${colour}" stroke-width="${sw}"${s.dashed ? ` stroke-dasharray="${(4 / zoom).toFixed(3)}"` : ""}/>` +
      text(s.x + 2 / zoom, s.y + 12 / zoom, s.label);
  }
  return `<line x1="${s.x1.toFixed(3)}" y1="${s.y1.toFixed(3)}" x2="${s.x2.toFixed(3)}" y2="${s.y2.toFixed(3)}" stroke="${colour}" stroke-width="${(2 / zoom).toFixed(3)}" marker-end="url(#arrowhead)"/>` +
    `<circle cx="${s.x1.toFixed(3)}" cy="${s.y1.toFixed(3)}" r="${(2.5 / zoom).toFixed(3)}" fill="${colour}"/>` +
    text(Math.max(s.x1, s.x2) + 4 / zoom, Math.min(s.y1, s.y2) - 4 / zoom, s.label);
}

function imageBlock(img: ReportImage): string {
  const zoom = magnification(img.width, img.height);
  const w = img.width * zoom, h = img.height * zoom;
  const overlays = img.overlays.map((o) =>
    `<g class="overlay" id="ov-${img.id}-${o.id}" data-overlay="${o.id}" style="display:${o.on && !o.unavailable ? "inline" : "none"}">` +
    o.shapes.map((s) => shapeSvg(s, o.colour, zoom)).join("") + "</g>").join("");
  const switches = img.overlays.map((o) =>
    `<label class="switch${o.unavailable ? " off" : ""}" title="${escapeHtml(o.unavailable ?? "")}"><input type="checkbox" data-target="ov-${img.id}-${o.id}"${o.on && !o.unavailable ? " checked" : ""}${o.unavailable ? " disabled" : ""}> ` +
    `<span class="swatch" style="background:${o.colour}"></span>${escapeHtml(o.label)}${o.unavailable ? ` <small>(${escapeHtml(o.unavailable)})</small>` : ""}</label>`).join("");
  let bar = "";
  if (img.scaleBar) {
    const mm = scaleBarMm(img.width * img.pixelMm.x);
    const px = (mm / img.pixelMm.x) * zoom;
    bar = `<div class="scalebar" data-mm="${mm}" style="width:${px.toFixed(1)}px"><span>${fmt(mm)} mm</span></div>`;
  }
  return `<figure class="img" id="fig-${img.id}">
<figcaption>${escapeHtml(img.title)}</figcaption>
<div class="frame">
<div class="edge top" data-edge="top">${escapeHtml(img.letters.top)}</div>
<div class="row">
<div class="edge left" data-edge="left">${escapeHtml(img.letters.left)}</div>
<div class="pic" style="width:${w}px;height:${h}px">
<img src="${dataUrl(img.png)}" width="${w}" height="${h}" alt="${escapeHtml(img.title)}">
<svg class="ov" viewBox="0 0 ${img.width} ${img.height}" width="${w}" height="${h}" xmlns="http://www.w3.org/2000/svg">
<defs><marker id="arrowhead" viewBox="0 0 10 10" refX="8" refY="5" markerWidth="5" markerHeight="5" orient="auto-start-reverse"><path d="M0,0 L10,5 L0,10 z" fill="context-stroke"/></marker></defs>
${overlays}</svg>
</div>
<div class="edge right" data-edge="right">${escapeHtml(img.letters.right)}</div>
</div>
<div class="edge bottom" data-edge="bottom">${escapeHtml(img.letters.bottom)}</div>
</div>
${bar}
<div class="switches">${switches}</div>
${img.caption ? `<p class="caption">${escapeHtml(img.caption)}</p>` : ""}
</figure>`;
}

function table(id: string, rows: TableRow[]): string {
  return `<table id="${id}"><thead><tr><th>quantity</th><th>value</th><th>unit</th><th>note</th></tr></thead><tbody>` +
    rows.map((r) => `<tr${r.key ? ` data-key="${escapeHtml(r.key)}"` : ""}><td>${escapeHtml(r.label)}</td><td class="${/^[-+−]?[\d.]/.test(r.value) ? "num" : "val"}">${escapeHtml(r.value)}</td><td>${escapeHtml(r.unit ?? "")}</td><td class="note">${escapeHtml(r.note ?? "")}</td></tr>`).join("") +
    "</tbody></table>";
}

function checksTable(items: CheckItem[]): string {
  return `<section id="checks"><h2>Checks</h2><table><thead><tr><th>check</th><th>value</th><th>unit</th><th>verdict</th><th>threshold</th><th>reason</th></tr></thead><tbody>` +
    items.map((c) => `<tr data-key="${escapeHtml(c.key)}" class="verdict-${escapeHtml(c.verdict)}"><td>${escapeHtml(c.label)}</td><td class="num">${escapeHtml(typeof c.value === "number" ? fmt(c.value) : c.value ?? "—")}</td><td>${escapeHtml(c.unit)}</td><td class="verdict">${escapeHtml(c.verdict)}</td><td>${escapeHtml(c.threshold)}</td><td class="note">${escapeHtml(c.reason)}</td></tr>`).join("") +
    "</tbody></table></section>";
}

function comparisons(rows: ComparisonRow[], note?: string): string {
  if (rows.length === 0) return "";
  return `<section id="compare"><h2>Predicted and measured</h2><table><thead><tr><th>quantity</th><th>predicted</th><th>measured</th><th>measured − predicted</th><th>unit</th><th>note</th></tr></thead><tbody>` +
    rows.map((r) => {
      const d = r.predicted !== null && r.measured !== null ? r.measured - r.predicted : null;
      return `<tr${r.key ? ` data-key="${escapeHtml(r.key)}"` : ""}><td>${escapeHtml(r.label)}</td><td class="num predicted">${fmt(r.predicted)}</td><td class="num measured">${fmt(r.measured)}</td><td class="num">${fmt(d)}</td><td>${escapeHtml(r.unit)}</td><td class="note">${escapeHtml(r.note ?? "")}</td></tr>`;
    }).join("") +
    `</tbody></table>${note ? `<p class="note">${escapeHtml(note)}</p>` : ""}</section>`;
}

export const STYLE = `
body{font-family:system-ui,sans-serif;margin:1.5em auto;max-width:1200px;padding:0 1em;color:#1d1d1d;background:#fafafa}
h1{font-size:1.5em;margin-bottom:.2em} h2{font-size:1.15em;border-bottom:1px solid #bbb;padding-bottom:.2em;margin-top:1.6em}
.safety{border:2px solid #a33;background:#fff3f0;padding:.5em .8em;font-weight:600}
table{border-collapse:collapse;font-size:.86em;margin:.4em 0;background:white}
th,td{border:1px solid #ccc;padding:.2em .5em;text-align:left;vertical-align:top} td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
td.note{color:#555;max-width:40em}
.images{display:flex;flex-wrap:wrap;gap:2em;align-items:flex-start}
figure.img{margin:0} figcaption{font-weight:600;margin-bottom:.3em}
.frame{display:inline-flex;flex-direction:column;align-items:center}
.frame .row{display:flex;align-items:center}
.edge{font:700 15px/1 sans-serif;color:#333;padding:3px 6px}
.pic{position:relative;background:black}
.pic img{image-rendering:pixelated;display:block}
.pic svg.ov{position:absolute;left:0;top:0;overflow:visible}
.scalebar{height:6px;background:#222;margin:.5em 0 0 1.8em;position:relative}
.scalebar span{position:absolute;top:8px;left:0;font-size:.8em;white-space:nowrap}
.switches{margin-top:1.6em;display:flex;flex-wrap:wrap;gap:.3em 1.2em;font-size:.9em}
.switch.off{color:#888} .swatch{display:inline-block;width:.8em;height:.8em;margin-right:.3em;vertical-align:-1px;border:1px solid #333}
.caption,.note{color:#555;font-size:.85em;max-width:60em}
.plots{display:flex;flex-wrap:wrap;gap:1em} .plot svg{background:white;border:1px solid #ddd}
.warnings li{margin:.2em 0}
.tables{display:flex;flex-wrap:wrap;gap:2em;align-items:flex-start}
.verdict-fine .verdict{color:#17692a}.verdict-watch .verdict{color:#8a5a00}.verdict-problem .verdict{color:#a31515;font-weight:700}
footer{margin-top:2em;color:#666;font-size:.8em}
`;

const SCRIPT = `
for (const box of document.querySelectorAll('input[type=checkbox][data-target]')) {
  const apply = () => { const g = document.getElementById(box.dataset.target); if (g) g.style.display = box.checked ? 'inline' : 'none'; };
  box.addEventListener('change', apply);
  apply();
}
`;

/** The whole page as one HTML string. */
export function renderReportHtml(page: ReportPage): string {
  return `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${escapeHtml(page.title)}</title>
<style>${STYLE}</style></head>
<body>
<header><h1>${escapeHtml(page.title)}</h1><p>${escapeHtml(page.subtitle)}</p>
<p class="safety" id="safety">${escapeHtml(page.safety)}</p></header>
${page.checks && page.checks.length ? checksTable(page.checks) : ""}
${comparisons(page.comparisons, page.comparisonNote)}
${page.images.length ? `<section id="images"><h2>Images</h2><p class="note">${escapeHtml(page.displayNote)}</p>
<div class="images">${page.images.map(imageBlock).join("\n")}</div></section>` : ""}
${page.plots.length ? `<section id="profiles"><h2>Line profiles</h2><div class="plots">${page.plots.map((p) => `<div class="plot" title="${escapeHtml(p.title)}">${p.svg}</div>`).join("")}</div></section>` : ""}
<section id="warnings"><h2>Warnings</h2>${page.warnings.length ? `<ul class="warnings">${page.warnings.map((w) => `<li>${escapeHtml(w)}</li>`).join("")}</ul>` : "<p>none</p>"}</section>
<div class="tables">${page.tables.map((t) => `<section id="${escapeHtml(t.id)}"><h2>${escapeHtml(t.title)}</h2>${table(`table-${t.id}`, t.rows)}</section>`).join("\n")}</div>
<footer>${escapeHtml(page.footer)}</footer>
<script>${SCRIPT}</script>
</body></html>
`;
}
