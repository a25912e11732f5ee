/**
 * Wiring for the chemical-shift and ground-truth outputs of a run: calls the
 * analysis stage (predictions, measurement, truth maps) and encodes the truth
 * files. No physics here.
 */
import type { TruthMaps } from "../analysis/index.js";
import { encodeNpy } from "../io/npy.js";
import { encodeGrayPng } from "../io/png.js";
import { toDisplay, type DisplayTransform } from "../report/index.js";

export { fatShiftReport } from "../analysis/report.js";


/**
 * Fat-fraction-weighted centre of the truth maps (m along read, phase; index n
 * of N at (n − ⌊N/2⌋)·Δ), or null when the slice holds no fat.
 */
export function fatCentroid(t: TruthMaps, dRead: number, dPhase: number): { u: number; v: number } | null {
  let w = 0, su = 0, sv = 0;
  for (let p = 0; p < t.nPhase; p++) {
    for (let r = 0; r < t.nRead; r++) {
      const f = t.fatFraction[p * t.nRead + r]! * t.pd[p * t.nRead + r]!;
      if (!(f > 0)) continue;
      w += f;
      su += f * (r - Math.floor(t.nRead / 2)) * dRead;
      sv += f * (p - Math.floor(t.nPhase / 2)) * dPhase;
    }
  }
  return w > 0 ? { u: su / w, v: sv / w } : null;
}

/** truth-<map>.npy (float32 / int32, shape [phase, read]) and truth-<map>.png for each map (PNGs in display orientation). */
export function truthFiles(t: TruthMaps, display?: DisplayTransform): Map<string, Uint8Array> {
  const out = new Map<string, Uint8Array>();
  const shape = [t.nPhase, t.nRead];
  const picture = (data: Float64Array, low: number, high: number) => {
    const d = display ? toDisplay(display, data, t.nRead, t.nPhase) : { values: data, width: t.nRead, height: t.nPhase };
    return encodeGrayPng(d.values, d.width, d.height, { low, high }).png;
  };
  const maps: [string, Float64Array][] = [["pd", t.pd], ["t1", t.t1], ["t2", t.t2], ["t2star", t.t2star], ["df", t.df], ["fatfraction", t.fatFraction]];
  for (const [name, data] of maps) {
    out.set(`truth-${name}.npy`, encodeNpy({ dtype: "float32", shape, data }));
    let lo = Infinity, hi = -Infinity;
    for (const v of data) { if (v < lo) lo = v; if (v > hi) hi = v; }
    const low = name === "df" ? lo : 0;
    const high = hi > low ? hi : low + 1;
    out.set(`truth-${name}.png`, picture(data, low, high));
  }
  out.set("truth-labels.npy", encodeNpy({ dtype: "int32", shape, data: t.label }));
  const lab = Float64Array.from(t.label);
  out.set("truth-labels.png", picture(lab, 0, Math.max(1, t.labels.length)));
  out.set("truth-labels.json", new TextEncoder().encode(JSON.stringify({ "0": "empty", ...Object.fromEntries(t.labels.map((n, i) => [String(i + 1), n])) }, null, 2) + "\n"));
  return out;
}
