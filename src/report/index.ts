/** Public face of the report stage: display orientation, plots and the HTML report, from plain data. */
export { displayTransform, toDisplay, displayPoint, directionLetters, DISPLAY_CONVENTION } from "./display.js";
export type { DisplayTransform } from "./display.js";
export { renderReportHtml, escapeHtml, fmt, magnification, scaleBarMm } from "./html.js";
export type { CheckItem, ComparisonRow, Overlay, OverlayShape, ReportImage, ReportPage, TableRow } from "./html.js";
export { vegaLiteSvg, lineSpec } from "./plots.js";
export type { Series } from "./plots.js";
export { runReportHtml, runReportPage, defaultRoi, rectToDisplay, profilePlots, renderPlots, type PlotRenderer } from "./run-report.js";
export type { RunReportInput, LogicalRect } from "./run-report.js";
export { montage, drawText, textWidth, glyphPixel, GLYPH_W, GLYPH_H, GLYPH_ADVANCE } from "./montage.js";
export type { Tile } from "./montage.js";
export { renderSweepHtml } from "./sweep-html.js";
export type { SweepColumn, SweepRow, SweepPage } from "./sweep-html.js";
