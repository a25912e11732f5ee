/**
 * `readout: "auto"` (the default): the engine predicts the cost of the
 * direct operator (the spoiled shortcut's readout) and of the fast operator
 * (engine/fast.ts) from the plan before either runs, and runs the cheaper.
 * Checked here: the predictions and the choice (not timings: speed is
 * measured by `npm run bench`), that the auto result is bitwise the chosen
 * operator's for any number of workers, and the report. The cases follow the
 * calibration in engine/fast.ts: a uniform-B0 two-bottle case like the demo,
 * where the shortcut already folds the readout into few groups, and the
 * torso with its T2′ spread (thousands of (Δf, R2) classes), where the
 * direct operator pays a recurrence per readout group.
 */
import { describe, expect, test } from "vitest";
import fc from "fast-check";
import { DistinctCount } from "../src/engine/fast.js";
import { prepare } from "../src/cli/pipeline.js";
import { DEFAULT_TOLERANCE, makePlan, predictReadoutCosts, simulateSerial } from "../src/engine/index.js";
import { simulateParallel } from "../src/engine/node.js";
import type { IsochromatOptions } from "../src/isochromats/index.js";
import { tempDir } from "./helpers.js";
import { join } from "node:path";

function prep(phantom: string, protocol: string, sets: string[], iso: Partial<IsochromatOptions>) {
  return prepare({
    phantom, protocol, sets, out: join(tempDir(), "out"), seed: 1,
    iso: { density: 1, sliceCount: 3, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 1, offsetHz: 0, ...iso }, workers: 1,
  });
}

type Run = { kspace: { re: Float64Array; im: Float64Array } };
const same = (a: Run, b: Run) =>
  Buffer.from(a.kspace.re.buffer).equals(Buffer.from(b.kspace.re.buffer)) && Buffer.from(a.kspace.im.buffer).equals(Buffer.from(b.kspace.im.buffer));

describe("readout auto: the cheaper operator by predicted cost", () => {
  test("uniform B0, two-bottle demo case (32², preview quality): direct predicted cheaper, chosen, bitwise the direct result for 1 and 2 workers", async () => {
    const p = prep("phantoms/two-bottle.json", "gre-demo-1.5t", ["matrix.read=32", "matrix.phase=32"], {});
    const plan = makePlan(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    const c = predictReadoutCosts(p.seq, plan, p.iso, DEFAULT_TOLERANCE);
    expect(plan.spoiledFast).toBe(true); // the fast operator applies: the choice is by cost
    expect(c.fastMs).not.toBeNull();
    expect(c.directMs).toBeGreaterThan(0);
    expect(c.directMs).toBeLessThan(c.fastMs!);
    const o = { receiverFilter: p.protocol.receiverFilter };
    const auto = simulateSerial(p.seq, p.iso, o); // the default is auto
    const direct = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
    expect(auto.readout.requested).toBe("auto");
    expect(auto.readout.operator).toBe("direct");
    expect(auto.readout.choice).toBe("direct");
    expect(auto.readout.fallback).toBeUndefined();
    expect(auto.readout.predicted!.directMs).toBe(c.directMs);
    expect(auto.readout.predicted!.fastMs).toBe(c.fastMs);
    expect(auto.kspace.re.some((x) => x !== 0)).toBe(true);
    expect(same(auto, direct)).toBe(true);
    for (const workers of [1, 2]) {
      const r = await simulateParallel(p.seq, p.iso, { ...o, workers });
      expect(r.readout.choice).toBe("direct");
      expect(same(r, direct)).toBe(true);
    }
  }, 60_000);

  test("torso with T2′ spread (thousands of (Δf, R2) classes, 32²): fast predicted much cheaper, chosen, bitwise the fast result for 1 and 2 workers", async () => {
    const p = prep("phantoms/torso-slice.json", "gre-t1-3t", ["matrix.read=32", "matrix.phase=32"], { sliceCount: 12, t2primeIsochromats: 16 });
    const plan = makePlan(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    expect(plan.classes).toBeGreaterThan(1000);
    const c = predictReadoutCosts(p.seq, plan, p.iso, DEFAULT_TOLERANCE);
    expect(c.fastMs).not.toBeNull();
    expect(c.directMs).toBeGreaterThan(1.5 * c.fastMs!);
    // the bounds on R and L cover what the run needs
    const o = { receiverFilter: p.protocol.receiverFilter };
    const auto = simulateSerial(p.seq, p.iso, o);
    expect(auto.readout.requested).toBe("auto");
    expect(auto.readout.choice).toBe("fast");
    expect(auto.readout.operator).toBe("fast");
    expect(auto.readout.lineRank!).toBeLessThanOrEqual(c.lineRankBound!);
    expect(auto.readout.segments!).toBeLessThanOrEqual(c.segmentsBound!);
    const fast = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
    expect(fast.readout.requested).toBe("fast");
    expect(fast.readout.predicted).toBeUndefined();
    expect(same(auto, fast)).toBe(true);
    for (const workers of [1, 2]) {
      const r = await simulateParallel(p.seq, p.iso, { ...o, workers });
      expect(r.readout.operator).toBe("fast");
      expect(same(r, fast)).toBe(true);
    }
  }, 60_000);

  test("where the fast operator does not apply (RARE: an in-plane moment at its refocusing pulses), auto runs direct and says why", () => {
    const p = prep("phantoms/two-bottle.json", "rare-t2-1.5t", ["matrix.read=16", "matrix.phase=16", "echoTrainLength=4", "te=40 ms"], {});
    const a = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    const d = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    expect(a.readout.operator).toBe("direct");
    expect(a.readout.predicted!.fastMs).toBeNull();
    expect(a.readout.fallback).toMatch(/depends on the in-plane position/);
    expect(same(a, d)).toBe(true);
  }, 60_000);

  test("a looser tolerance lowers the fast operator's predicted cost (fewer segments and ranks), the direct one stays", () => {
    // the torso with a T2′ spread: many (Δf, R2) keys and classes, so the bounds are the tolerance's, not the key or class counts
    const p = prep("phantoms/torso-slice.json", "gre-t1-3t", ["matrix.read=16", "matrix.phase=16"], { sliceCount: 4, t2primeIsochromats: 8 });
    const plan = makePlan(p.seq, p.iso, { receiverFilter: true });
    const tight = { ...predictReadoutCosts(p.seq, plan, p.iso, 1e-9) };
    const loose = predictReadoutCosts(p.seq, plan, p.iso, 1e-3);
    expect(loose.segmentsBound!).toBeLessThan(tight.segmentsBound!);
    expect(loose.lineRankBound!).toBeLessThan(tight.lineRankBound!);
    expect(loose.fastMs!).toBeLessThan(tight.fastMs!);
    expect(loose.directMs).toBe(tight.directMs);
  });

  test("where the spoiled operator does not apply (segmented EPI), the fold's own prediction decides, and the report says so", async () => {
    // the run() path (streamed cells, then the stored isochromats for the fold or the direct readout)
    const { run } = await import("../src/cli/pipeline.js");
    const r = await run({
      phantom: "phantoms/torso-slice.json", protocol: "epi-4shot-3t", sets: ["matrix.read=32", "matrix.phase=32"], out: join(tempDir(), "e4"), seed: 1, quiet: true,
      iso: { density: 1, sliceCount: 3, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 1, offsetHz: 0 }, workers: 1, keepWarnings: true,
    });
    const ro = (r.report["engine"] as { readout: { operator: string; choice: string; fallback?: string; foldPredicted?: { directMs: number; fastMs: number } } }).readout;
    expect(ro.foldPredicted).toBeDefined();
    // the choice named is the operator that ran, by the fold's prediction (not the spoiled operator's, which did not apply)
    const foldCheaper = ro.foldPredicted!.fastMs < ro.foldPredicted!.directMs;
    expect(ro.choice).toBe(ro.operator);
    if (ro.operator === "direct") {
      expect(foldCheaper).toBe(false);
      expect(ro.fallback).toMatch(/fold was predicted slower than the direct readout/);
    } else expect(foldCheaper).toBe(true);
  }, 60_000);
});

describe("the cost model's bounds on the line rank R and the segments L", () => {
  // L is at most the number of distinct decay curves ((R2, Δf) keys) and R at most min(lines, classes): the ranks
  // of the matrices the two factors approximate (linear algebra: a matrix of n distinct columns has rank ≤ n)
  test.each([
    ["one tissue, no spread (disc): one key, so one segment", "phantoms/disc.json", "gre-t1-3t", {}, 1],
    ["water and multi-peak fat (two-bottle): a few keys", "phantoms/two-bottle.json", "gre-demo-1.5t", {}, null],
    ["torso with a T2′ spread: many keys", "phantoms/torso-slice.json", "gre-t1-3t", { sliceCount: 4, t2primeIsochromats: 8 }, null],
  ] as const)("%s: the bounds hold for the run and never pass the key and class counts", (_name, phantom, protocol, iso, segments) => {
    const p = prep(phantom, protocol, ["matrix.read=24", "matrix.phase=24"], iso);
    const plan = makePlan(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    const c = predictReadoutCosts(p.seq, plan, p.iso, DEFAULT_TOLERANCE);
    const keys = new Set<string>();
    for (let k = 0; k < plan.classes; k++) keys.add(`${plan.rf.classDf[k]}|${plan.rf.classR2[k]}`);
    expect(c.segmentsBound!).toBeLessThanOrEqual(keys.size);
    expect(c.lineRankBound!).toBeLessThanOrEqual(plan.classes);
    if (segments !== null) expect(c.segmentsBound).toBe(segments);
    const fast = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
    expect(fast.readout.operator).toBe("fast");
    expect(fast.readout.segments!).toBeLessThanOrEqual(c.segmentsBound!);
    expect(fast.readout.lineRank!).toBeLessThanOrEqual(c.lineRankBound!);
  }, 60_000);
});

describe("the cost model's distinct counts", () => {
  // engine/fast.ts DistinctCount stands in for Set<number>.size (oracle: the Set itself), across clears
  // and growth, on keys small and up to 2^53 − 1 with many repeats
  test("DistinctCount.size equals a Set's size after the same adds and clears", () => {
    fc.assert(
      fc.property(
        fc.array(fc.array(fc.oneof(fc.integer({ min: 0, max: 50 }), fc.integer({ min: 0, max: 5000 }), fc.maxSafeNat()), { maxLength: 3000 }), { minLength: 1, maxLength: 4 }),
        (rounds) => {
          const d = new DistinctCount();
          for (const keys of rounds) {
            d.clear();
            const s = new Set<number>();
            for (const k of keys) {
              d.add(k);
              s.add(k);
            }
            if (d.size !== s.size) return false;
          }
          return true;
        },
      ),
      { numRuns: 200, seed: 7 },
    );
  });
});
