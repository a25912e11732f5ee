/**
 * The fast readout operator's phase step shared with a helper thread
 * (engine/fast-phase.ts, engine/fast-node.ts): the k-space must be bitwise
 * the k-space of the same operator on one thread (the oracle for the
 * parallel path; the one-thread operator is itself checked against the
 * direct operator in engine-fast-stream.test.ts), with one coil (two passes,
 * pairs skipped by their norm) and with coil sensitivities (one pass), and
 * within the tolerance of the direct operator. Small grids; the helper is
 * forced on (minimum work 0).
 */
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";
import { prepare } from "../src/cli/pipeline.js";
import { nodeExecutor, serialExecutor, simulateCells, simulateSerial } from "../src/engine/node.js";
import { lastHelperBlocks, lastRfSplit, setPhaseHelper } from "../src/engine/fast.js";
import { runRfJob } from "../src/engine/rf-job.js";
import { fillRfMaps, makePlan } from "../src/engine/plan.js";
import { nodePhaseHelper } from "../src/engine/fast-node.js";
import { reservedBytes, reservePhaseMemory, reserveUsed } from "../src/engine/fast-phase.js";
import { relL2, tempDir, writeJson } from "./helpers.js";
import { setFftWasm } from "../src/recon/fft.js";
import { setFoldWasm } from "../src/engine/fold-wasm.js";
import { setSliceWasm } from "../src/engine/slice-basis.js";
import { setInterpolationMinClasses } from "../src/engine/fast-stream.js";

function prep(m: number, sets: string[] = []) {
  return prepare({
    phantom: "phantoms/torso-slice.json", protocol: "gre-t1-3t",
    sets: [`matrix.read=${m}`, `matrix.phase=${m}`, "spoiling=ideal", ...sets],
    out: join(tempDir(), "out"), seed: 1,
    iso: { density: 2, sliceCount: 4, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 2, offsetHz: 0 }, workers: 1,
  });
}

function sameBits(a: Float64Array, b: Float64Array): boolean {
  return Buffer.from(a.buffer, a.byteOffset, a.byteLength).equals(Buffer.from(b.buffer, b.byteOffset, b.byteLength));
}

/**
 * Three runs with the helper (the first may find it still starting: the main
 * thread then does every block) give bitwise `one`, and the helper did take
 * part (blocks it transformed).
 */
async function expectHelpedSameBits(run: (helper: boolean) => Promise<{ kspace: { re: Float64Array; im: Float64Array } }>, one: { re: Float64Array; im: Float64Array }, rfHalf = false): Promise<void> {
  let helped = 0;
  for (let k = 0; k < 3; k++) {
    const two = await run(true);
    helped += lastHelperBlocks();
    // the upper half of the RF maps was offered to the helper (fillRfMapsShared; on a small case the main thread often takes it back first)
    if (rfHalf) expect(lastRfSplit()).not.toBe("none");
    expect(sameBits(two.kspace.re, one.re) && sameBits(two.kspace.im, one.im)).toBe(true);
  }
  expect(helped).toBeGreaterThan(0);
}

/** Four loops and the uniform coil, fast operator, with or without the helper (and the engine's wasm option). */
async function coilRun(p: ReturnType<typeof prep>) {
  const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
  const array = { elements: 4, rows: 1, loopRadius: 0.08, arrayRadius: 0.25, rowSpacing: 0, zCentre: 0 };
  return async (helper: boolean, wasm = true) => {
    setPhaseHelper(helper ? nodePhaseHelper : null, 0);
    return simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast", wasm });
  };
}

afterAll(() => setPhaseHelper(nodePhaseHelper));

describe("RF maps filled in two halves (fillRfMapsShared, rf-job.ts runRfJob)", () => {
  test("a job's half and the rest give the maps of one fill bit for bit; a job taken back is left alone", () => {
    const p = prep(24);
    const plan = makePlan(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    const C = plan.classes;
    expect(C).toBeGreaterThan(3);
    fillRfMaps(plan, 0, C);
    const whole = plan.rfMaps.slice();
    for (const cm of [1, C >> 1, C - 1]) {
      plan.rfMaps.fill(0);
      const ctrl = new Int32Array(new SharedArrayBuffer(4));
      runRfJob({ rf: plan.rf, maps: plan.rfMaps, classes: C, wasm: plan.wasm, c0: cm, c1: C, ctrl });
      expect(Atomics.load(ctrl, 0)).toBe(2);
      fillRfMaps(plan, 0, cm);
      expect(sameBits(plan.rfMaps, whole)).toBe(true);
    }
    plan.rfMaps.fill(0);
    const taken = new Int32Array(new SharedArrayBuffer(4));
    Atomics.store(taken, 0, 3);
    runRfJob({ rf: plan.rf, maps: plan.rfMaps, classes: C, wasm: plan.wasm, c0: 0, c1: C, ctrl: taken });
    expect(plan.rfMaps.every((x) => x === 0)).toBe(true);
  });
});

describe("fast operator with a helper thread", () => {
  test("one coil: bitwise the one-thread k-space, within the tolerance of direct", async () => {
    const p = prep(32);
    const run = async (helper: boolean) => {
      // every hand-off from the smallest work on: the phase blocks, the read step and half the RF maps
      setPhaseHelper(helper ? nodePhaseHelper : null, 0, 0);
      return simulateCells(serialExecutor(), p.seq, p.cells, () => p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
    };
    const one = await run(false);
    expect(one.readout.operator).toBe("fast");
    expect(lastRfSplit()).toBe("none");
    await expectHelpedSameBits(run, one.kspace, true);
    const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    expect(relL2(one.kspace.re, one.kspace.im, direct.kspace.re, direct.kspace.im)).toBeLessThan(1e-6);
  }, 60_000);

  test("a B0 model interpolated in Δf (fast-stream.ts DfNodes), 4 loops + the uniform coil: bitwise the one-thread k-space", async () => {
    const j = JSON.parse(readFileSync("phantoms/torso-slice.json", "utf8")) as Record<string, unknown>;
    j["b0"] = { expression: "200 * x + 150 * y + 12" };
    const phantom = writeJson(tempDir(), "torso-b0.json", j);
    const p = prepare({
      phantom, protocol: "gre-t1-3t", sets: ["matrix.read=20", "matrix.phase=20", "spoiling=ideal"], out: join(tempDir(), "out"), seed: 1,
      iso: { density: 2, sliceCount: 4, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 2, offsetHz: 0 }, workers: 1,
    });
    const was = setInterpolationMinClasses(0);
    try {
      const run = await coilRun(p);
      const one = await run(false);
      expect(one.readout[0]!.operator).toBe("fast");
      expect(one.readout[0]!.b0Interpolation).toBeDefined();
      await expectHelpedSameBits(run, one.kspace);
    } finally {
      setInterpolationMinClasses(was);
    }
  }, 60_000);

  test("4 loops + the uniform coil: bitwise the one-thread k-space", async () => {
    const run = await coilRun(prep(24));
    const one = await run(false);
    expect(one.readout[0]!.operator).toBe("fast");
    expect(one.kspace.coils).toBe(5);
    await expectHelpedSameBits(run, one.kspace);
    // the helper evaluates the sensitivities ahead (the fold copies only what a column reads; the estimate
    // evaluates the others itself where it needs them): the same estimate as on one thread
    const helped = await run(true);
    expect(helped.readout[0]!.estimate!.relL2).toBeGreaterThan(0);
    expect(helped.readout[0]!.estimate).toEqual(one.readout[0]!.estimate);
    // the same runs from a memory reserve whose pages the helper wrote ahead, reused (zeroed) by each run
    const r = reservePhaseMemory(reservedBytes() + 64 * 2 ** 20);
    expect(r).not.toBeNull();
    nodePhaseHelper()!.touch!(r!.buf, r!.ctrl);
    await expectHelpedSameBits(run, one.kspace);
    expect(reservedBytes()).toBe(r!.buf.byteLength);
    expect(reserveUsed()).toBeGreaterThan(0);
  }, 60_000);

  test("coils with the phase FOV smaller than the body (several columns fold into one grid position): bitwise the one-thread k-space, and the SIMD kernels' TypeScript twins give the same bits", async () => {
    // 24 × 24 over a 16 cm phase FOV: the torso wraps, so the helper's slots see positions added to twice and
    // positions a block writes that the block before did not (SlotTrack, ParallelPhase.seal)
    const run = await coilRun(prep(24, ["fov.phase=16 cm"]));
    const one = await run(false);
    expect(one.readout[0]!.operator).toBe("fast");
    await expectHelpedSameBits(run, one.kspace);
    const wasFft = setFftWasm(false), wasFold = setFoldWasm(false), wasSlice = setSliceWasm(false);
    try {
      const twins = await run(true);
      expect(sameBits(twins.kspace.re, one.kspace.re) && sameBits(twins.kspace.im, one.kspace.im)).toBe(true);
      // the estimate does not depend on the kernels either
      expect(twins.readout[0]!.estimate).toEqual(one.readout[0]!.estimate);
      expect(one.readout[0]!.estimate!.relL2).toBeGreaterThan(0);
      const twinsOne = await run(false);
      expect(sameBits(twinsOne.kspace.re, one.kspace.re) && sameBits(twinsOne.kspace.im, one.kspace.im)).toBe(true);
      // the engine's option wasm: false reaches the helper thread too (its kernels off there as well)
      const off = await run(true, false);
      expect(sameBits(off.kspace.re, one.kspace.re) && sameBits(off.kspace.im, one.kspace.im)).toBe(true);
    } finally {
      setFftWasm(wasFft);
      setFoldWasm(wasFold);
      setSliceWasm(wasSlice);
    }
  }, 60_000);

  test("an executor of one thread (--workers 1) keeps the fast operator off the helper: no block handed over, the same bits", async () => {
    const p = prep(32);
    expect(nodeExecutor(1).threads).toBe(1);
    setPhaseHelper(nodePhaseHelper, 0);
    const opts = { receiverFilter: p.protocol.receiverFilter, readout: "fast" as const };
    const two = await simulateCells(serialExecutor(), p.seq, p.cells, () => p.iso, opts);
    const one = await simulateCells({ ...serialExecutor(), threads: 1 }, p.seq, p.cells, () => p.iso, opts);
    expect(one.readout.operator).toBe("fast");
    expect(lastHelperBlocks()).toBe(0);
    expect(sameBits(two.kspace.re, one.kspace.re) && sameBits(two.kspace.im, one.kspace.im)).toBe(true);
  });
});
