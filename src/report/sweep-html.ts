/**
 * sweep.html: the table of a parameter sweep, its montage and its plots, in
 * one self-contained page (montage inlined, plots inline SVG, no script, no
 * network). Built from plain data.
 */
import { escapeHtml, fmt, STYLE } from "./html.js";

export interface SweepColumn {
  key: string;
  label: string;
  unit: string;
}

export interface SweepRow {
  point: number;
  /** "done" or "impossible". */
  status: string;
  params: Record<string, number>;
  metrics: Record<string, number | null>;
  reason?: string;
  /** Relative link to the point's report.html. */
  link?: string;
}

export interface SweepPage {
  title: string;
  subtitle: string;
  safety: string;
  params: SweepColumn[];
  metrics: SweepColumn[];
  rows: SweepRow[];
  montage: Uint8Array | null;
  /** Montage size in pixels; shown at twice that (pixelated), at most the page width. */
  montageSize?: { width: number; height: number };
  montageNote: string;
  plots: { title: string; svg: string }[];
  warnings: string[];
  footer: string;
}

export function renderSweepHtml(p: SweepPage): string {
  const head = [`<th>point</th>`, `<th>status</th>`,
    ...p.params.map((c) => `<th>${escapeHtml(c.label)} (${escapeHtml(c.unit)})</th>`),
    ...p.metrics.map((c) => `<th>${escapeHtml(c.label)}${c.unit ? ` (${escapeHtml(c.unit)})` : ""}</th>`), `<th>note</th>`].join("");
  const body = p.rows.map((r) => `<tr data-point="${r.point}" class="${escapeHtml(r.status)}"><td>${r.link ? `<a href="${escapeHtml(r.link)}">${r.point}</a>` : r.point}</td><td>${escapeHtml(r.status)}</td>` +
    p.params.map((c) => `<td class="num" data-key="${escapeHtml(c.key)}">${fmt(r.params[c.key])}</td>`).join("") +
    p.metrics.map((c) => `<td class="num" data-key="${escapeHtml(c.key)}">${fmt(r.metrics[c.key] ?? null)}</td>`).join("") +
    `<td class="note">${escapeHtml(r.reason ?? "")}</td></tr>`).join("");
  const impossible = p.rows.filter((r) => r.status !== "done");
  return `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; img-src data:; style-src 'unsafe-inline'">
<title>${escapeHtml(p.title)}</title><style>${STYLE}
tr.impossible td{color:#888}
.montage img{image-rendering:pixelated;border:1px solid #ccc;max-width:100%}
</style></head><body>
<header><h1>${escapeHtml(p.title)}</h1><p>${escapeHtml(p.subtitle)}</p><p class="safety" id="safety">${escapeHtml(p.safety)}</p></header>
<section id="points"><h2>Points</h2><table id="sweep-table"><thead><tr>${head}</tr></thead><tbody>${body}</tbody></table></section>
<section id="impossible"><h2>Impossible points (skipped)</h2>${impossible.length ? `<ul>${impossible.map((r) => `<li>point ${r.point}: ${escapeHtml(r.reason ?? "")}</li>`).join("")}</ul>` : "<p>none</p>"}</section>
<section id="montage" class="montage"><h2>Montage</h2>${p.montage ? `<img src="data:image/png;base64,${Buffer.from(p.montage).toString("base64")}"${p.montageSize ? ` style="width:${2 * p.montageSize.width}px"` : ""} alt="montage of the simulated images">` : "<p>no point was simulated</p>"}<p class="note">${escapeHtml(p.montageNote)}</p></section>
<section id="plots"><h2>Metrics against the varied parameters</h2><div class="plots">${p.plots.map((x) => `<div class="plot" title="${escapeHtml(x.title)}">${x.svg}</div>`).join("")}</div></section>
<section id="warnings"><h2>Warnings</h2>${p.warnings.length ? `<ul class="warnings">${p.warnings.map((w) => `<li>${escapeHtml(w)}</li>`).join("")}</ul>` : "<p>none</p>"}</section>
<footer>${escapeHtml(p.footer)}</footer>
</body></html>
`;
}
