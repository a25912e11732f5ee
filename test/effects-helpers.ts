/**
 * Small in-process pipeline for the effects tests: protocol object → sequence
 * → isochromats → engine → image, plus the truth maps on the image grid.
 */
import assert from "node:assert/strict";
import { parsePhantom } from "../src/phantom/index.js";
import { parseProtocolObject, logicalAxes, type Protocol } from "../src/protocol/index.js";
import { buildSequence, type Sequence } from "../src/sequence/index.js";
import { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "../src/isochromats/index.js";
import { simulateSerial } from "../src/engine/index.js";
import { reconstructCartesian, magnitude } from "../src/recon/reconstruct.js";
import { truthMaps, type TruthMaps } from "../src/analysis/index.js";
import { sampledLimits } from "../src/cli/pipeline.js";

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

export function simulate(phantomJson: unknown, protocol: Record<string, unknown>, iso: Partial<IsochromatOptions> = {}): SimResult {
  const p = parseProtocolObject(protocol as never, "test-protocol.json");
  const seq = buildSequence(p);
  const ph = parsePhantom(phantomJson, "test-phantom.json", p.field);
  const axes = logicalAxes(p);
  const dx = p.fov.read / p.matrix.read, dy = p.fov.phase / p.matrix.phase;
  const opt = { ...defaultIsochromatOptions(), sliceCount: 1, sliceExtent: 1, ...iso, offsetHz: p.shim };
  const set = makeIsochromats(ph, {
    axes, dx, dy, thickness: p.slice.thickness, position: p.slice.position,
    ...sampledLimits(p),
  }, p.field, opt);
  // a test phantom that misses the slice would compare zeros with zeros: fail loudly instead
  assert.ok(set.count > 0, "the test phantom puts no isochromat in the slice");
  const { kspace } = simulateSerial(seq, set, { receiverFilter: p.receiverFilter });
  const img = reconstructCartesian({ slice: seq.kspace.slice, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im }, seq.image);
  const truth = truthMaps(ph, { axes, nRead: seq.image.read, nPhase: seq.image.phase, dx, dy, thickness: p.slice.thickness, position: p.slice.position, offsetHz: p.shim });
  const F = 4;
  const fine = truthMaps(ph, { axes, nRead: F * seq.image.read, nPhase: F * seq.image.phase, dx: dx / F, dy: dy / F, thickness: p.slice.thickness, position: p.slice.position, offsetHz: p.shim });
  return { protocol: p, seq, iso: set, kre: kspace.re, kim: kspace.im, re: img.re, im: img.im, mag: magnitude(img), truth, fine };
}
