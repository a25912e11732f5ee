/**
 * The chemical-shift part of a run's report: predicted (readout, slice, EPI
 * phase) and measured fat–water displacement, with the truth maps they used.
 * No file is read or written here.
 */
import { predictProtocolFatShift, measureFatShift, multiPeakMeanPpm, hasWaterAndFat } from "./fatshift.js";
import { truthMaps, type TruthMaps } from "./truth.js";
import { FAT_SINGLE_PPM } from "../constants.js";
import type { Phantom } from "../phantom/index.js";
import { logicalAxes, slicePositions, type Protocol } from "../protocol/index.js";
import type { Sequence } from "../sequence/index.js";

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
  // the plane measured below is the middle one of the image's slice axis (index ⌊S/2⌋): the slices of a
  // multi-slice protocol in spatial order, or a 3D slab's slice-encoding steps, centred on slice.position
  // (step p at position + (p − (S − 1)/2)·spacing); the truth maps are of that plane, so that they and the
  // measured plane agree where they differ from slice.position (an even count)
  // (`seq` is the first slice's sequence: a 2D one holds one slice, so the count comes from `mag`)
  const nSlice = Math.round(mag.length / (nRead * nPhase)), mid = Math.floor(nSlice / 2);
  const position = seq.grid.threeD
    ? protocol.slice.position + (mid - (nSlice - 1) / 2) * protocol.slice.thickness
    : nSlice > 1 ? slicePositions(protocol).positions[mid]! : protocol.slice.position;
  const truth = truthMaps(phantom, {
    axes, nRead, nPhase, dx, dy, thickness: protocol.slice.thickness, position, offsetHz: protocol.shim,
  });
  const main = predictProtocolFatShift(protocol, seq, FAT_SINGLE_PPM);
  const mean = predictProtocolFatShift(protocol, seq, multiPeakMeanPpm());
  // the search window around each object must reach the shifted fat image
  // (per axis: a window grown along read for an EPI shift along phase would reach objects beside the fat one)
  const margin = {
    read: 3 + Math.ceil(Math.max(Math.abs(main.readout.perLinePx ?? main.readout.px), Math.abs(mean.readout.perLinePx ?? mean.readout.px))),
    phase: 3 + Math.ceil(Math.max(Math.abs(main.phase.px), Math.abs(mean.phase.px))),
  };
  // water is not moved by the chemical shift: its window stays near it, clear of the shifted fat image
  const waterMargin = 3;
  // a shift beyond a quarter of the matrix lets the fat image wrap or land on other objects: not measured
  const tooFar = Math.abs(main.readout.px) > nRead / 4 || Math.abs(main.phase.px) > nPhase / 4;
  const plane = mag.subarray(mid * nRead * nPhase, (mid + 1) * nRead * nPhase);
  // a finer truth grid gives the measurement a band-limited template (see measureFatShift); it is
  // sampled only where there is something to measure (with no water or no fat object the measurement is null)
  const factor = Math.max(1, Math.min(4, Math.floor(1024 / Math.max(nRead, nPhase))));
  const measurable = !tooFar && hasWaterAndFat(truth.pd, truth.fatFraction);
  const fine = measurable && factor > 1
    ? truthMaps(phantom, { axes, nRead: factor * nRead, nPhase: factor * nPhase, dx: dx / factor, dy: dy / factor, thickness: protocol.slice.thickness, position, offsetHz: 0 }, "pd-fat")
    : truth;
  const measured = !measurable
    ? null
    : measureFatShift(plane, truth.pd, truth.fatFraction, nRead, nPhase, dx, dy, margin, { factor, pd: fine.pd, fatFraction: fine.fatFraction }, waterMargin);
  const side = (px: number | undefined, m: number | undefined) => (px === undefined ? null : { px, mm: (m ?? 0) * 1e3 });
  const report: Record<string, unknown> = {
    fatModel,
    fatHz: main.hz,
    note:
      "signed along the positive logical axis (read, phase) or slice normal; direction names the physical axis. " +
      "Predicted for the main methylene peak (−3.4 ppm, Hamilton et al. 2011) and for the amplitude-weighted six-peak mean; " +
      "with the multi-peak model each peak makes its own shifted copy, and the copies add with TE-dependent phases, so the measured shift lies near these values but need not equal either; use --fat-model single for a clean comparison. Slice shift is predicted only (a 2D image cannot show it).",
    predicted: {
      readout: {
        px: main.readout.px, mm: main.readout.m * 1e3, direction: main.readout.direction, note: main.readout.note,
        ...(main.readout.perLinePx !== undefined ? { perLinePx: main.readout.perLinePx } : {}),
      },
      slice: {
        mm: main.slice.m * 1e3, direction: main.slice.direction, note: main.slice.note,
        ...(main.slice.refocusedM !== undefined ? { refocusedMm: main.slice.refocusedM * 1e3, refocusedDirection: main.slice.refocusedDirection } : {}),
      },
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
