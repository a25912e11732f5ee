/**
 * Wiring for the chemical-shift and ground-truth outputs of a run: calls the
 * analysis stage (predictions, measurement, truth maps) and encodes the truth
 * files. No physics here.
 */
import type { TruthMaps } from "../analysis/index.js";
import { encodeNpy } from "../io/npy.js";
import { encodeGrayPng } from "../io/png.js";

export { fatShiftReport } from "../analysis/report.js";

/** truth-<map>.npy (float32 / int32, shape [phase, read]) and truth-<map>.png for each map. */
export function truthFiles(t: TruthMaps): Map<string, Uint8Array> {
  const out = new Map<string, Uint8Array>();
  const shape = [t.nPhase, t.nRead];
  const maps: [string, Float64Array][] = [["pd", t.pd], ["t1", t.t1], ["t2", t.t2], ["t2star", t.t2star], ["df", t.df], ["fatfraction", t.fatFraction]];
  for (const [name, data] of maps) {
    out.set(`truth-${name}.npy`, encodeNpy({ dtype: "float32", shape, data }));
    let lo = Infinity, hi = -Infinity;
    for (const v of data) { if (v < lo) lo = v; if (v > hi) hi = v; }
    const low = name === "df" ? lo : 0;
    const high = hi > low ? hi : low + 1;
    out.set(`truth-${name}.png`, encodeGrayPng(data, t.nRead, t.nPhase, { low, high }).png);
  }
  out.set("truth-labels.npy", encodeNpy({ dtype: "int32", shape, data: t.label }));
  const lab = Float64Array.from(t.label);
  out.set("truth-labels.png", encodeGrayPng(lab, t.nRead, t.nPhase, { low: 0, high: Math.max(1, t.labels.length) }).png);
  out.set("truth-labels.json", new TextEncoder().encode(JSON.stringify({ "0": "empty", ...Object.fromEntries(t.labels.map((n, i) => [String(i + 1), n])) }, null, 2) + "\n"));
  return out;
}
