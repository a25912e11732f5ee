/**
 * Wiring for the chemical-shift and ground-truth outputs of a run: calls the
 * analysis stage (predictions, measurement, truth maps) and encodes the truth
 * files. No physics here.
 */
import { predictProtocolFatShift, measureFatShift, multiPeakMeanPpm, truthMaps, type TruthMaps } from "../analysis/index.js";
import { FAT_SINGLE_PPM } from "../constants.js";
import { encodeNpy } from "../io/npy.js";
import { encodeGrayPng } from "../io/png.js";
import type { Phantom } from "../phantom/index.js";
import { logicalAxes, type Protocol } from "../protocol/index.js";
import type { Sequence } from "../sequence/index.js";
import { toDisplay, type DisplayTransform } from "../report/index.js";

/**
 * Predicted (readout, slice, EPI phase) and measured fat–water displacement
 * for report.json, and the truth maps they used; the predictions come from
 * analysis' predictProtocolFatShift (EPI: the sequence's effectiveEchoSpacing).
 */
export function fatShiftReport(
  protocol: Protocol, seq: Sequence, phantom: Phantom, mag: Float64Array, fatModel: "single" | "multi",
): { report: Record<string, unknown>; truth: TruthMaps; warnings: string[] } {
  const axes = logicalAxes(protocol);
  const nRead = seq.image.read, nPhase = seq.image.phase;
  const dx = protocol.fov.read / protocol.matrix.read, dy = protocol.fov.phase / protocol.matrix.phase;
  const truth = truthMaps(phantom, {
    axes, nRead, nPhase, dx, dy, thickness: protocol.slice.thickness, position: protocol.slice.position, offsetHz: protocol.shim,
  });
  const main = predictProtocolFatShift(protocol, seq, FAT_SINGLE_PPM);
  const mean = predictProtocolFatShift(protocol, seq, multiPeakMeanPpm());
  // the search window around each object must reach the shifted fat image
  const predicted = Math.max(Math.abs(main.readout.px), Math.abs(main.phase.px), Math.abs(mean.readout.px), Math.abs(mean.phase.px));
  const margin = 3 + Math.ceil(predicted);
  // a shift beyond a quarter of the matrix lets the fat image wrap or land on other objects: not measured
  const tooFar = Math.abs(main.readout.px) > nRead / 4 || Math.abs(main.phase.px) > nPhase / 4;
  const plane = mag.subarray(Math.floor(seq.image.slice / 2) * nRead * nPhase, (Math.floor(seq.image.slice / 2) + 1) * nRead * nPhase);
  // a finer truth grid gives the measurement a band-limited template (see measureFatShift)
  const factor = Math.max(1, Math.min(4, Math.floor(1024 / Math.max(nRead, nPhase))));
  const fine = factor > 1
    ? truthMaps(phantom, { axes, nRead: factor * nRead, nPhase: factor * nPhase, dx: dx / factor, dy: dy / factor, thickness: protocol.slice.thickness, position: protocol.slice.position, offsetHz: 0 })
    : truth;
  const measured = tooFar
    ? null
    : measureFatShift(plane, truth.pd, truth.fatFraction, nRead, nPhase, dx, dy, margin, { factor, pd: fine.pd, fatFraction: fine.fatFraction });
  const side = (px: number | undefined, m: number | undefined) => (px === undefined ? null : { px, mm: (m ?? 0) * 1e3 });
  const report: Record<string, unknown> = {
    fatModel,
    fatHz: main.hz,
    note:
      "signed along the positive logical axis (read, phase) or slice normal; direction names the physical axis. " +
      "Predicted for the main methylene peak (−3.4 ppm, Hamilton et al. 2011) and for the amplitude-weighted six-peak mean; " +
      "with the multi-peak model each peak makes its own shifted copy, and the copies add with TE-dependent phases, so the measured shift lies near these values but need not equal either; use --fat-model single for a clean comparison. Slice shift is predicted only (a 2D image cannot show it).",
    predicted: {
      readout: { px: main.readout.px, mm: main.readout.m * 1e3, direction: main.readout.direction, note: main.readout.note },
      slice: { mm: main.slice.m * 1e3, direction: main.slice.direction, note: main.slice.note },
      phase: { px: main.phase.px, mm: main.phase.m * 1e3, direction: main.phase.direction, note: main.phase.note },
      multiPeakMean: { ppm: mean.ppm, readoutPx: mean.readout.px, phasePx: mean.phase.px, sliceMm: mean.slice.m * 1e3 },
    },
    measured: measured
      ? {
          readout: side(measured.readPx, measured.readM),
          phase: side(measured.phasePx, measured.phaseM),
          separable: measured.separable,
          waterPixels: measured.waterPixels,
          fatPixels: measured.fatPixels,
          method: measured.method,
        }
      : {
          readout: null, phase: null,
          reason: tooFar
            ? `the predicted shift (${main.readout.px.toFixed(1)} px along read, ${main.phase.px.toFixed(1)} px along phase) exceeds a quarter of the matrix, so the fat image may wrap or overlap other objects; not measured`
            : "the slice holds no separate water and fat objects (pixels with fat fraction < 0.5 and ≥ 0.5)",
        },
  };
  const warnings: string[] = [];
  if (measured && !measured.separable) {
    warnings.push("fat shift: the water and fat objects lie within a few pixels of each other after the shift; the measured shift may be biased");
  }
  return { report, truth, warnings };
}

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
