/**
 * The time-segmented fold of the readout (engine/fold.ts) for the sequences
 * the general path plays: against the direct operator (readout "direct", the
 * oracle: every readout group through the recurrence) in relative L2 of
 * k-space, the a-posteriori estimate against the true error, and bits for
 * any executor. Time segmentation: Noll, Meyer, Pauly, Nishimura & Macovski
 * 1991, IEEE TMI 10:629; least-squares interpolators: Sutton, Noll & Fessler
 * 2003, IEEE TMI 22:178.
 */
import { describe, expect, test } from "vitest";
import { writeFileSync, readFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { prepare } from "../src/cli/pipeline.js";
import { fitShape, simulateSerial, type SimulateOptions } from "../src/engine/index.js";
import { simulateParallel } from "../src/engine/node.js";
import type { IsochromatOptions, IsochromatSet } from "../src/isochromats/index.js";
import { tempDir } from "./helpers.js";

const ROOT = resolve(import.meta.dirname, "..");

/** two-bottle with a B0 expression: a gradient of `hzPerCm` Hz/cm along x plus a curvature along y. */
function phantomWithB0(hzPerCm: number): string {
  const p = JSON.parse(readFileSync(join(ROOT, "phantoms", "two-bottle.json"), "utf8")) as Record<string, unknown>;
  p.b0 = { expression: `${hzPerCm * 100} * x + 2000 * y^2` };
  const f = join(tempDir(), "b0-phantom.json");
  writeFileSync(f, JSON.stringify(p));
  return f;
}

function prep(protocol: string, sets: string[], iso: Partial<IsochromatOptions> = {}, phantom = join(ROOT, "phantoms", "two-bottle.json")) {
  return prepare({
    phantom, protocol, sets, out: join(tempDir(), "out"), seed: 1,
    iso: { density: 1, sliceCount: 3, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 1, offsetHz: 0, ...iso }, workers: 1,
  });
}

/** Smooth complex sensitivities of `coils` coils around the FOV (a made-up model: Gaussian profiles with a linear phase). */
function sensitivities(iso: IsochromatSet, coils: number): Float64Array {
  const s = new Float64Array(2 * coils * iso.count);
  for (let q = 0; q < coils; q++) {
    const ang = (2 * Math.PI * q) / coils, cx = 0.06 * Math.cos(ang), cy = 0.06 * Math.sin(ang);
    for (let i = 0; i < iso.count; i++) {
      const x = iso.uGrid[iso.iu[i]!]!, y = iso.vGrid[iso.iv[i]!]!;
      const m = Math.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * 0.08 ** 2)), ph = 10 * (x * Math.sin(ang) - y * Math.cos(ang));
      s[2 * (q * iso.count + i)] = m * Math.cos(ph);
      s[2 * (q * iso.count + i) + 1] = m * Math.sin(ph);
    }
  }
  return s;
}

function relL2(a: { re: Float64Array; im: Float64Array }, b: { re: Float64Array; im: Float64Array }): number {
  let n = 0, d = 0;
  for (let k = 0; k < a.re.length; k++) {
    n += (a.re[k]! - b.re[k]!) ** 2 + (a.im[k]! - b.im[k]!) ** 2;
    d += b.re[k]! ** 2 + b.im[k]! ** 2;
  }
  return Math.sqrt(n / d);
}

type P = ReturnType<typeof prep>;
function both(p: P, extra: Partial<SimulateOptions> = {}) {
  const o: SimulateOptions = { receiverFilter: p.protocol.receiverFilter, ...extra };
  const fast = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
  const direct = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
  return { fast, direct, err: relL2(fast.kspace, direct.kspace) };
}

describe("smoke", () => {
  test("se with B0 and T2′", () => {
    const p = prep("se-t2-1.5t", ["matrix.read=32", "matrix.phase=32"], { t2primeIsochromats: 4 }, phantomWithB0(10));
    const t0 = Date.now();
    const r = both(p);
    console.log(Date.now() - t0, r.err, JSON.stringify(r.fast.readout), r.direct.readout);
  }, 60_000);
});
