/**
 * Effects tests: a protocol object over a small base, the tests' one pipeline
 * (helpers.ts), plus the truth maps on the image grid.
 */
import { logicalAxes, type Protocol } from "../src/protocol/index.js";
import type { Sequence } from "../src/sequence/index.js";
import type { IsochromatOptions, IsochromatSet } from "../src/isochromats/index.js";
import { truthMaps, type TruthMaps } from "../src/analysis/index.js";
import { runPipeline } from "./helpers.js";

export interface SimResult {
  protocol: Protocol;
  seq: Sequence;
  iso: IsochromatSet;
  kre: Float64Array;
  kim: Float64Array;
  re: Float64Array;
  im: Float64Array;
  mag: Float64Array;
  truth: TruthMaps;
  /** Truth on a 4× finer grid (band-limited template for measureFatShift). */
  fine: TruthMaps;
}

/** A protocol object: defaults below, overridden by `over` (shallow per top-level key). */
export function protocolObject(over: Record<string, unknown>): Record<string, unknown> {
  return {
    sequence: "gre", field: "3 T",
    fov: { read: "8 cm", phase: "8 cm" }, matrix: { read: 32, phase: 32 },
    slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" },
    phaseDirection: "y", bandwidth: "200 Hz/px", te: "6 ms", tr: "30 ms", flip: "30 deg",
    oversampling: { read: 2, phase: 0 },
    excitation: { shape: "hard", duration: "0.1 ms", steps: 4 },
    ...over,
  };
}

/** The tests' one pipeline (helpers.ts runPipeline; one isochromat through the slice unless `iso` says otherwise, as given), plus the truth maps on the image grid. */
export function simulate(phantomJson: unknown, protocol: Record<string, unknown>, iso: Partial<IsochromatOptions> = {}): SimResult {
  const r = runPipeline(protocol, phantomJson, { sliceCount: 1, sliceExtent: 1, ...iso }, [], { exact: true });
  const p = r.protocol, seq = r.seq, ph = r.phantom;
  const axes = logicalAxes(p);
  const dx = p.fov.read / p.matrix.read, dy = p.fov.phase / p.matrix.phase;
  const truth = truthMaps(ph, { axes, nRead: seq.image.read, nPhase: seq.image.phase, dx, dy, thickness: p.slice.thickness, position: p.slice.position, offsetHz: p.shim });
  const F = 4;
  const fine = truthMaps(ph, { axes, nRead: F * seq.image.read, nPhase: F * seq.image.phase, dx: dx / F, dy: dy / F, thickness: p.slice.thickness, position: p.slice.position, offsetHz: p.shim });
  return { protocol: p, seq, iso: r.iso, kre: r.kspace.re, kim: r.kspace.im, re: r.image.re, im: r.image.im, mag: r.mag, truth, fine };
}
