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
import { addInto, blockCount, fitShape, serialExecutor, shardBlocks, simulateSerial, simulateWith, webWorkerExecutor, type SimulateOptions } from "../src/engine/index.js";
import { simulate } from "../src/api.js";
import { simulateParallel } from "../src/engine/node.js";
import type { IsochromatOptions, IsochromatSet } from "../src/isochromats/index.js";
import { relL2 as relL2Arrays, tempDir } from "./helpers.js";
import { standIns } from "./web-standins.js";

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

/** Relative L2 error of k-space a against b (test/helpers.ts relL2). */
const relL2 = (a: { re: Float64Array; im: Float64Array }, b: { re: Float64Array; im: Float64Array }): number => relL2Arrays(a.re, a.im, b.re, b.im);

type P = ReturnType<typeof prep>;
function both(p: P, extra: Partial<SimulateOptions> = {}) {
  const o: SimulateOptions = { receiverFilter: p.protocol.receiverFilter, ...extra };
  const fast = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
  const direct = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
  return { fast, direct, err: relL2(fast.kspace, direct.kspace) };
}

const TOL = 1e-6;
const M32 = ["matrix.read=32", "matrix.phase=32"];

/**
 * Checks one case: the fold ran, is within the tolerance of direct, and its estimate covers the true error within
 * ESTIMATE_FACTOR: 1, the estimate bounds the true error (its subset holds the k-space centre and its strata, and it
 * is at least a tenth of the tolerance; a factor 2 was allowed before those two).
 */
const ESTIMATE_FACTOR = 1;
function check(name: string, p: P, extra: Partial<SimulateOptions> = {}) {
  const r = both(p, extra);
  const est = r.fast.readout.estimate?.relL2 ?? NaN;
  if (process.env.ISOFOLD_PRINT_FOLD) console.log(`FOLD ${name}: L=${r.fast.readout.segments} true=${r.err.toExponential(2)} estimate=${est.toExponential(2)}`);
  expect(r.fast.readout.operator).toBe("fast");
  // sequences whose state at every pulse is per RF class (spin echoes with no in-plane moment at the refocusing
  // pulse, balanced ones: plan.classState) take the class operator (low-rank line factor); the others the fold
  expect(r.fast.readout.method).toMatch(r.fast.plan.classState ? /time-segmented fold|low-rank line factor/ : /time-segmented fold/);
  expect(r.fast.readout.segments).toBeGreaterThanOrEqual(1);
  expect(r.direct.readout.operator).toBe("direct");
  expect(r.direct.kspace.re.some((x) => x !== 0)).toBe(true);
  expect(r.err).toBeLessThanOrEqual(TOL);
  // the oracle that shares nothing with the class playback: every op on every isochromat (general: true)
  const general = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, ...extra, general: true });
  expect(relL2(r.fast.kspace, general.kspace)).toBeLessThanOrEqual(TOL);
  expect(relL2(r.direct.kspace, general.kspace)).toBeLessThanOrEqual(1e-10);
  // the a-posteriori estimate (direct lines inside the run) is not far below the true error
  expect(est * ESTIMATE_FACTOR).toBeGreaterThanOrEqual(r.err);
  return r;
}

describe("time-segmented fold against the direct operator (relative L2 of k-space ≤ 1e-6)", () => {
  test("spin echo, B0 expression (10 Hz/cm along x, curvature along y) and T2′ spread", () => {
    check("se", prep("se-t2-1.5t", M32, { t2primeIsochromats: 4 }, phantomWithB0(10)));
  });
  test("RARE with multi-peak fat (the oil bottle)", () => {
    check("rare", prep("rare-t2-1.5t", M32, { fatModel: "multi" }));
  });
  test("bSSFP with a B0 expression", () => {
    check("bssfp", prep("bssfp-1.5t", M32, {}, phantomWithB0(5)));
  });
  test("RF-spoiled GRE with the T2′ spread", () => {
    check("gre-rf", prep("gre-t1-3t", [...M32, "spoiling=rf"], { t2primeIsochromats: 4 }));
  });
  test("a readout gradient with a phase part (an oblique readout): positions keyed on (read, phase, slice) indices", () => {
    // no bundled sequence reads out along a tilted axis; the same RF-spoiled GRE with 5 % of the read gradient
    // added along phase during every readout is played by both operators (the direct one is the oracle)
    const p = prep("gre-t1-3t", [...M32, "spoiling=rf"], { t2primeIsochromats: 2 });
    const seq = { ...p.seq, blocks: p.seq.blocks.map((b) => (b.kind === "adc" ? { ...b, grad: [b.grad[0], 0.05 * b.grad[0], 0] as [number, number, number] } : b)) };
    const r = check("oblique", { ...p, seq });
    const plain = both(p);
    // the tilt changes k-space (the check compares two runs of the tilted sequence, not a no-op)
    expect(relL2(r.direct.kspace, plain.direct.kspace)).toBeGreaterThan(1e-3);
    expect(r.fast.readout.fold?.positions).toBeGreaterThan(plain.fast.readout.fold?.positions ?? Infinity);
    // the transform over (read, phase, slice) positions ran as the non-uniform FFT (src/engine/nufft.ts), its width from the tolerance
    expect(r.fast.readout.kernelWidth).toBeGreaterThanOrEqual(7);
  });
  test("3D GRE (RF spoiled, 4 slice-encoding steps) with a B0 expression", () => {
    check("gre3d", prep("gre3d-t1-1.5t", ["matrix.read=16", "matrix.phase=16", "matrix.slice=4", "spoiling=rf"], { sliceCount: 2 }, phantomWithB0(5)));
  });
  test("EPI single-shot with a B0 expression", () => {
    check("epi", prep("epi-1.5t", M32, {}, phantomWithB0(5)));
  });
  test("EPI segmented (4 shots) with the T2′ spread and fat", () => {
    check("epi-4shot", prep("epi-4shot-3t", M32, { t2primeIsochromats: 4 }));
  });
  test("multi-slice spin echo, the second of two slices (the other slice's pulses played), B0 expression", () => {
    const p = prep("se-t1-multislice-1.5t", [...M32, "slices.count=2"], {}, phantomWithB0(10));
    expect(p.slices.length).toBe(2);
    const s = p.slices[1]!;
    check("multislice", { ...p, seq: s.seq, iso: s.iso } as P);
  });
  test("spin echo with 3 coils (sensitivities per isochromat), B0 and T2′", () => {
    const p = prep("se-t2-1.5t", M32, { t2primeIsochromats: 4 }, phantomWithB0(10));
    const r = check("coils", p, { coils: 3, sens: sensitivities(p.iso, 3) });
    expect(r.fast.kspace.coils).toBe(3);
  });
});

describe("the fold's check can fail, and its bits do not depend on the executor", () => {
  test("a looser tolerance (1e-2) gives a larger true error than 1e-6, both within their tolerance and covered by the estimate", () => {
    const p = prep("epi-1.5t", M32, { t2primeIsochromats: 4 }, phantomWithB0(10));
    const o: SimulateOptions = { receiverFilter: p.protocol.receiverFilter };
    const direct = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
    const tight = simulateSerial(p.seq, p.iso, { ...o, readout: "fast", tolerance: 1e-6 });
    const loose = simulateSerial(p.seq, p.iso, { ...o, readout: "fast", tolerance: 1e-2 });
    const eT = relL2(tight.kspace, direct.kspace), eL = relL2(loose.kspace, direct.kspace);
    if (process.env.ISOFOLD_PRINT_FOLD) console.log(`FOLD tolerance: L ${tight.readout.segments} / ${loose.readout.segments}, true ${eT.toExponential(2)} / ${eL.toExponential(2)}, estimate ${tight.readout.estimate?.relL2.toExponential(2)} / ${loose.readout.estimate?.relL2.toExponential(2)}`);
    expect(loose.readout.operator).toBe("fast");
    expect(loose.readout.segments!).toBeLessThan(tight.readout.segments!);
    expect(eL).toBeGreaterThan(10 * eT);
    expect(eL).toBeLessThanOrEqual(1e-2);
    expect(eT).toBeLessThanOrEqual(1e-6);
    expect(loose.readout.estimate!.relL2 * ESTIMATE_FACTOR).toBeGreaterThanOrEqual(eL);
  });

  test("interpolators: the fitted error bound holds on a dense off-grid sweep of (Δf, R2), computed directly", () => {
    // independent of the fit's own check grid: exp(−jΔtλ) against Σ_l B_l(j)·exp(−l·τ·λ) at random points of the box
    const ns = 40, dwell = 1 / 12800, target = 1e-7;
    const s = fitShape(ns, dwell, -300, 250, 5, 40, target)!;
    expect(s).not.toBeNull();
    let worst = 0, seed = 7;
    const rnd = () => ((seed = (seed * 1103515245 + 12345) % 2147483648) / 2147483648);
    for (let k = 0; k < 2000; k++) {
      const f = -300 + 550 * rnd(), r2 = 5 + 35 * rnd();
      for (let j = 0; j < ns; j++) {
        let sr = 0, si = 0;
        for (let l = 0; l < s.L; l++) {
          const t = l * s.tau, e = Math.exp(-t * r2), th = -2 * Math.PI * f * t;
          const br = s.B[2 * (j * s.L + l)]!, bi = s.B[2 * (j * s.L + l) + 1]!;
          sr += br * e * Math.cos(th) - bi * e * Math.sin(th);
          si += br * e * Math.sin(th) + bi * e * Math.cos(th);
        }
        const t = j * dwell, e = Math.exp(-t * r2), th = -2 * Math.PI * f * t;
        worst = Math.max(worst, Math.hypot(sr - e * Math.cos(th), si - e * Math.sin(th)));
      }
    }
    expect(s.L).toBeGreaterThan(1);
    expect(worst).toBeLessThanOrEqual(2 * target);
    // fewer segments than chosen do not reach the target (L is the smallest)
    const fewer = fitShape(ns, dwell, -300, 250, 5, 40, target, s.L - 1);
    expect(fewer).toBeNull();
    // a narrow box (34 Hz over a 4 ms readout, one R2) needs few segments: the fit stays overdetermined
    const narrow = fitShape(32, 1 / 8000, -17, 17, 16.7, 16.7, target)!;
    expect(narrow).not.toBeNull();
    expect(narrow.L).toBeLessThanOrEqual(6);
    expect(narrow.error).toBeLessThanOrEqual(target);
  });

  test("bits: serial, 1 and 2 worker threads give the same fold k-space", async () => {
    const p = prep("rare-t2-1.5t", ["matrix.read=16", "matrix.phase=16", "echoTrainLength=4", "te=40 ms"], { t2primeIsochromats: 4 }, phantomWithB0(10));
    const o = { receiverFilter: p.protocol.receiverFilter, readout: "fast" as const, chunkIsochromats: 512 };
    const serial = simulateSerial(p.seq, p.iso, o);
    expect(serial.readout.method).toMatch(/time-segmented fold/);
    expect(serial.plan.chunks).toBeGreaterThan(2);
    for (const workers of [1, 2]) {
      const r = await simulateParallel(p.seq, p.iso, { ...o, workers });
      expect(r.readout.method).toMatch(/time-segmented fold/);
      expect(Buffer.from(r.kspace.re.buffer).equals(Buffer.from(serial.kspace.re.buffer))).toBe(true);
      expect(Buffer.from(r.kspace.im.buffer).equals(Buffer.from(serial.kspace.im.buffer))).toBe(true);
    }
  }, 60_000);

  test("sharded runs fold every chunk and block 0 carries the folded k-space: the shards' block sums, added in block order as isofold merge adds them, give the unsharded bits", async () => {
    const p = prep("rare-t2-1.5t", ["matrix.read=16", "matrix.phase=16", "echoTrainLength=4", "te=40 ms"], {}, phantomWithB0(10));
    const o: SimulateOptions = { receiverFilter: p.protocol.receiverFilter, readout: "fast", chunkIsochromats: 64 };
    const whole = simulateSerial(p.seq, p.iso, o);
    expect(whole.readout.method).toMatch(/time-segmented fold/);
    const total = blockCount(whole.plan.chunks);
    expect(total).toBeGreaterThan(2);
    const bits = (a: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);
    for (const n of [2, 3]) {
      const sums: [Float64Array, Float64Array][] = [];
      for (let i = 0; i < n; i++) {
        const blocks = shardBlocks(total, i, n);
        const keep = { ...o, blocks, onBlock: (b: number, re: Float64Array, im: Float64Array) => void (sums[b] = [re.slice(), im.slice()]) };
        // both engine paths: the serial reference and an executor's
        const r = i % 2 === 0 ? simulateSerial(p.seq, p.iso, keep) : await simulateWith(serialExecutor(), p.seq, p.iso, keep);
        expect(r.readout.method, `shard ${i}/${n}`).toMatch(/time-segmented fold/);
        expect(r.readout.sharding).toMatch(/block 0/);
      }
      expect(sums.length).toBe(total);
      const re = new Float64Array(whole.kspace.re.length), im = new Float64Array(whole.kspace.im.length);
      for (let b = 0; b < total; b++) addInto(re, im, sums[b]![0], sums[b]![1]);
      expect(bits(re).equals(bits(whole.kspace.re)), `${n} shards, re`).toBe(true);
      expect(bits(im).equals(bits(whole.kspace.im)), `${n} shards, im`).toBe(true);
    }
  });

  test("bits: the Web Worker executor (in-process stand-ins, 1 and 2 workers) gives the serial fold k-space; the report says fast, the method, L and the estimate", async () => {
    const protocol = {
      sequence: "rare", field: "1.5 T", fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 16, phase: 16 },
      slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, bandwidth: "250 Hz/px", te: "40 ms", tr: "300 ms", echoTrainLength: 4,
    };
    const phantom = {
      name: "fold-disc", tissues: { gel: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "40 ms", species: "water" } },
      shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["4 cm", "3 cm"], tissue: "gel" }],
      b0: { expression: "300 * x + 170 * y" },
    };
    const opts = { protocol, phantom, iso: { density: 1, sliceCount: 2, t2primeIsochromats: 4 }, readout: "fast" as const, chunkIsochromats: 256, convergenceCheck: false };
    const serial = await simulate({ ...opts, executor: serialExecutor() });
    const engine = serial.report["engine"] as { chunks: number; readout: { operator: string; method: string; segments: number; estimate: { relL2: number } } };
    expect(engine.chunks).toBeGreaterThan(4);
    expect(engine.readout.operator, JSON.stringify(engine.readout)).toBe("fast");
    expect(engine.readout.method).toMatch(/time-segmented fold/);
    expect(engine.readout.segments).toBeGreaterThan(1);
    expect(engine.readout.estimate.relL2).toBeLessThanOrEqual(1e-6);
    const bits = (a: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);
    for (const n of [1, 2]) {
      const r = await simulate({ ...opts, executor: webWorkerExecutor(standIns(n)) });
      expect(bits(r.kspace.re).equals(bits(serial.kspace.re)), `${n} workers, re`).toBe(true);
      expect(bits(r.kspace.im).equals(bits(serial.kspace.im)), `${n} workers, im`).toBe(true);
    }
  });
});
