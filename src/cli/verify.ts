/**
 * `isofold check --verify`: simulates the protocol in-process (prepare and
 * the engine, as `simulate` does, one slice) and measures on the image what
 * the check predicted: fat shift (template fit), folded signal in the ROI
 * and where it lands, edge-spread width, mean displacement along read. Wiring only; the
 * measurements live in src/check/measure.ts.
 */
import { join } from "node:path";
import { tmpdir } from "node:os";
import { fatShiftInput, predictOffResonanceShift, truthMaps } from "../analysis/index.js";
import { parseRoi, type CheckResult } from "../check/index.js";
import { displacedParts, edgeWidthImage, edgeWidthPredicted, fitReadDisplacement, foldedByDifference, foldedSignal } from "../check/measure.js";
import { nodeExecutor, serialExecutor, simulateCells } from "../engine/node.js";
import { defaultIsochromatOptions, type IsochromatOptions } from "../isochromats/index.js";
import { logicalAxes, toPhysical } from "../protocol/index.js";
import { magnitude, reconstructGrid, toGrid } from "../recon/reconstruct.js";
import { fatShiftReport } from "./effects.js";
import { defaultWorkers } from "./memory.js";
import { chunkIsochromatsFromEnv, wasmFromEnv } from "./options.js";
import { prepare } from "./pipeline.js";
import type { CheckCliOptions } from "./check.js";

export interface VerifyRow {
  quantity: string;
  predicted: string;
  measured: string;
  difference: string;
  note: string;
  /** The numbers behind the strings (px unless named). */
  values?: { predicted: number | null; measured: number | null };
}

export interface VerifyResult {
  seconds: number;
  rows: VerifyRow[];
  slice: string;
  /** What may make a measured value wrong (e.g. the fat-shift fit's water and fat objects too close). */
  warnings: string[];
}

// a value that rounds to zero is printed 0.00, not −0.00
const n2 = (v: number | null | undefined, unit = "px") => (v === null || v === undefined || !Number.isFinite(v) ? "—" : `${(Math.abs(v) < 0.005 ? 0 : v).toFixed(2)} ${unit}`);

function row(quantity: string, p: number | null, m: number | null, note: string, unit = "px"): VerifyRow {
  return {
    quantity, predicted: n2(p, unit), measured: n2(m, unit),
    difference: p !== null && m !== null && Number.isFinite(p) && Number.isFinite(m) ? n2(m - p, unit) : "—",
    note, values: { predicted: p, measured: m },
  };
}

/** Simulates the (first, or only) slice of the protocol and compares with the check's predictions. */
export async function verifyCheck(
  phantomFile: string, o: CheckCliOptions, result: CheckResult, extra: { workers?: number; iso?: Partial<IsochromatOptions> } = {},
): Promise<VerifyResult> {
  const t0 = Date.now();
  const once = async (sets: string[]) => {
    const prep = prepare({
      phantom: phantomFile, protocol: o.protocol, sets, out: join(tmpdir(), "isofold-verify-unused"), seed: 1,
      iso: { ...defaultIsochromatOptions(), ...(extra.iso ?? {}) }, quiet: true,
    });
    const mid = prep.slices[Math.floor(prep.slices.length / 2)]!;
    const sl = mid.cells.count > 0 ? mid : prep.slices.find((s) => s.cells.count > 0)!;
    const workers = extra.workers ?? defaultWorkers();
    // the engine as `simulate` runs it: the readout operator chosen by cost, the fast one streamed from the cells
    // (a B0 varying in every cell interpolated in Δf), the isochromats made one by one only where the direct one runs
    const { kspace } = await simulateCells(workers <= 1 ? serialExecutor() : nodeExecutor(workers), sl.seq, sl.cells, () => sl.iso, {
      receiverFilter: prep.protocol.receiverFilter, chunkIsochromats: chunkIsochromatsFromEnv(), wasm: wasmFromEnv(),
    });
    return { prep, sl, kspace };
  };
  const { prep, sl, kspace } = await once(o.set ?? []);
  const { protocol: p, phantom } = prep;
  const seq = sl.seq;
  const grid = toGrid({ slice: seq.kspace.slice, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im }, seq.grid);
  const img = reconstructGrid(grid, seq.grid, seq.image);
  const nR = seq.image.read, nP = seq.image.phase, mid = Math.floor(seq.image.slice / 2);
  const plane = { re: img.re.subarray(mid * nR * nP, (mid + 1) * nR * nP), im: img.im.subarray(mid * nR * nP, (mid + 1) * nR * nP) };
  const magAll = magnitude(img);
  const mag = magAll.subarray(mid * nR * nP, (mid + 1) * nR * nP);
  const axes = logicalAxes(p);
  const dx = p.fov.read / p.matrix.read, dy = p.fov.phase / p.matrix.phase;
  // 3D: step p at position + (p − (S − 1)/2)·thickness (README, Conventions); 2D: the simulated slice of the stack
  const position = seq.grid.threeD ? p.slice.position + (mid - (seq.image.slice - 1) / 2) * p.slice.thickness : sl.position;
  const truth = truthMaps(phantom, { axes, nRead: nR, nPhase: nP, dx, dy, thickness: p.slice.thickness, position, offsetHz: p.shim });
  const rows: VerifyRow[] = [];

  // fat shift: the report's template fit
  // it measures the middle plane itself; a 2D stack's middle slice was simulated alone, so it is told where that slice is
  const fxProtocol = seq.grid.threeD ? p : { ...p, slice: { ...p.slice, position: sl.position }, slices: { ...p.slices, count: 1 } };
  const fx = fatShiftReport(fxProtocol, seq, phantom, magAll, "multi");
  const pred = (fx.report.predicted as { readout: { px: number }; phase: { px: number } });
  const meas = fx.report.measured as { readout: { px: number } | null; phase: { px: number } | null; reason?: string };
  rows.push(row("fat shift along read", pred.readout.px, meas.readout?.px ?? null, meas.readout ? "template fit of the fat object against the water object (six-peak fat: lies near the −3.4 ppm value)" : meas.reason ?? "not measured"));
  if (p.sequence === "epi") rows.push(row("fat shift along phase", pred.phase.px, meas.phase?.px ?? null, meas.phase ? "template fit" : meas.reason ?? "not measured"));

  // folded signal along phase
  const roiShape = o.roi !== undefined ? parseRoi(o.roi) : null;
  const xyz = [0, 0, 0];
  const inRoi = (col: number, r: number): boolean => {
    const u = (col - Math.floor(nR / 2)) * dx, v = (r - Math.floor(nP / 2)) * dy;
    if (!roiShape) return Math.abs(u) <= p.fov.read / 4 && Math.abs(v) <= p.fov.phase / 4;
    toPhysical(axes, u, v, position, xyz);
    return roiShape.contains(xyz[0]!, xyz[1]!, xyz[2]!);
  };
  // shifted (fat, B0) signal next to an object is not folded signal
  const px = (key: string) => Math.abs(((result.items.find((i) => i.key === key)?.detail ?? {}) as { px?: number }).px ?? 0);
  const reach = {
    read: 1 + Math.ceil(Math.max(px("fatShiftRead"), px("distortionRead"))),
    phase: 1 + Math.ceil(Math.max(px("fatShiftPhase"), px("distortionPhase"))),
  };
  const wp0 = result.wrap.phase;
  let fold = foldedSignal(mag, truth.pd, nR, nP, inRoi, 0.3, reach);
  let how = `rows holding signal where the phantom has none within ${reach.read} px along read and ${reach.phase} px along phase`;
  if (wp0.folded.length > 0 && wp0.minOversampling !== null && wp0.minOversampling > p.oversampling.phase) {
    // a reference scan with enough phase oversampling that nothing folds: folded signal = |image − reference|
    const ref = await once([...(o.set ?? []), `oversampling.phase=${wp0.minOversampling}`]);
    const rs = ref.sl.seq;
    const rimg = reconstructGrid(toGrid({ slice: rs.kspace.slice, phase: rs.kspace.phase, read: rs.kspace.read, re: ref.kspace.re, im: ref.kspace.im }, rs.grid), rs.grid, rs.image);
    const diff = new Float64Array(nR * nP);
    for (let i = 0; i < nR * nP; i++) diff[i] = Math.hypot(plane.re[i]! - rimg.re[mid * nR * nP + i]!, plane.im[i]! - rimg.im[mid * nR * nP + i]!);
    fold = foldedByDifference(mag, diff, fold.level, nR, nP, inRoi);
    how = `rows where the image differs from a fold-free reference (phase oversampling ${(wp0.minOversampling * 100).toFixed(0)} %)`;
  }
  const wp = result.wrap.phase;
  const landed = wp.folded.filter((f) => f.landsPx);
  const pLo = landed.length ? Math.min(...landed.map((f) => f.landsPx![0])) : null;
  const pHi = landed.length ? Math.max(...landed.map((f) => f.landsPx![1])) : null;
  rows.push(row("folded rows along phase", wp.rows, fold.rows, `${how}, above 30 % of the object's median${p.sequence === "epi" && how.startsWith("rows holding") ? "; in EPI this also counts ghosts and shifted fat-peak copies" : ""}`));
  rows.push(row("folded band: first row", pLo, fold.firstRow, "displayed row index"));
  rows.push(row("folded band: last row", pHi, fold.lastRow, "displayed row index"));
  rows.push(row("folded pixels in the ROI", wp.roiPixels, fold.roiPixels, `folded signal energy in the ROI: ${(fold.roiEnergyFraction * 100).toFixed(1)} % of the ROI's image energy (measured)`));

  // blur: edge spread along read at the steepest edge
  // a water edge against empty space, 4 px clear of anything else along the row (fat edges carry the spectrum's copies)
  const clear = (r: number, c0: number, dir: number) => {
    for (let k = 0; k < 4; k++) { const c = c0 + dir * k; if (c < 0 || c >= nR || truth.pd[r * nR + c]! > 0) return false; }
    return true;
  };
  const edge = edgeWidthImage(plane.re, plane.im, nR, nP, (r, b, d) =>
    truth.pd[r * nR + b]! > 0 && truth.fatFraction[r * nR + b]! < 0.5 && clear(r, d, d - b));
  if (edge) {
    const lbl = truth.label[edge.row * nR + edge.brightCol]!;
    const tissue = lbl > 0 ? phantom.tissues.find((t) => t.name === truth.labels[lbl - 1]) ?? null : null;
    const predicted = tissue ? edgeWidthPredicted(p, seq, tissue) : null;
    rows.push(row("edge spread 10–90 % along read", predicted, edge.width, `row ${edge.row}, column ${edge.col}${tissue ? `, ${tissue.name}` : ""}; predicted from the same exponentially weighted window`));
  }

  // mean displacement along read from B0: a least-squares fit of the image as the tissues' truth maps moved by one shift per read line
  const fatIn = fatShiftInput(p, seq);
  // predicted: Δf/BW per pixel at the mean Δf over the phantom's pixels in the plane simulated (the fit's weighting)
  let dfSum = 0, nSig = 0;
  for (let i = 0; i < nR * nP; i++) if (truth.pd[i]! > 0) { dfSum += truth.df[i]!; nSig++; }
  const predMean = predictOffResonanceShift(fatIn, nSig ? dfSum / nSig : 0).readout.px;
  if (seq.quantities.effectiveEchoSpacing !== undefined) {
    // B0 and the fat shift move an EPI image along phase by many pixels (Δf·N·ESP): read lines no longer hold what the truth's rows hold
    rows.push(row("mean displacement along read (B0)", predMean, null,
      "not measured in EPI: B0 and the fat shift also move the image along phase (see distortion along phase), which a fit along read lines cannot follow; predicted at the mean Δf over the phantom's pixels in the simulated plane"));
  } else {
    const dRead = result.items.find((i) => i.key === "distortionRead")!.detail as { dfMinHz: number; dfMaxHz: number };
    const reachPx = Math.max(...[dRead.dfMinHz, dRead.dfMaxHz].map((hz) => Math.abs(predictOffResonanceShift(fatIn, hz).readout.px)));
    const span = Math.min(Math.max(3, Math.ceil(reachPx) + 2), Math.floor(nR / 4));
    const fatModel = { ...defaultIsochromatOptions(), ...(extra.iso ?? {}) }.fatModel;
    const { parts, nW, stretchPerRamp } = displacedParts(phantom, p, seq, { axes, nPhase: nP, dx, dy, thickness: p.slice.thickness, position }, fatModel);
    const fit = fitReadDisplacement(plane.re, plane.im, truth.pd, nR, nP, parts, { range: [-span, span], nW, maxRamp: Math.PI / 4, stretchPerRamp });
    rows.push(row("mean displacement along read (B0)", predMean, fit.px,
      `least-squares fit of each read line of the complex image as every tissue's water and fat (its peaks at their chemical shifts) from the truth, all moved by one shift; ` +
        `mean over ${fit.lines} lines weighted by their phantom pixels, ${(fit.residual * 100).toFixed(1)} % of the image energy unexplained (a B0 gradient along read stretches a line: taken from its phase ramp, to first order, where it has one); ` +
        `predicted at the mean Δf over the phantom's pixels in the simulated plane`));
  }

  return { seconds: (Date.now() - t0) / 1000, rows, slice: `${(position * 1e3).toFixed(1)} mm`, warnings: fx.warnings.map((w) => `--verify: ${w}`) };
}
