/**
 * The fast operator's a-posteriori error estimate (engine/fast.ts estimateOver, engine/fold.ts): its
 * stratified subset (the k-space centre always in it) and its floor (ESTIMATE_FLOOR × tolerance), and a
 * seeded property over every bundled protocol and phantom: fast within the tolerance of direct (the oracle,
 * every isochromat at every sample) and the estimate at or above the true error, as the fast-encoding issue
 * asks ("the a-posteriori estimate bounds the true error"). Time segmentation: Noll, Meyer, Pauly, Nishimura &
 * Macovski 1991, IEEE TMI 10:629.
 */
import { describe, expect, test } from "vitest";
import fc from "fast-check";
import { join, resolve } from "node:path";
import { listPresets } from "../src/cli/inputs.js";
import { prepare } from "../src/cli/pipeline.js";
import { simulateSerial } from "../src/engine/index.js";
import { ESTIMATE_FLOOR, flooredEstimate, mulberry32, stratifiedPicks } from "../src/engine/fast.js";
import { UserError } from "../src/errors.js";
import { relL2, tempDir } from "./helpers.js";

const ROOT = resolve(import.meta.dirname, "..");

describe("stratifiedPicks", () => {
  test("the item of least key first, then one distinct item from each of count − 1 equal strata of the rest", () => {
    const items = Array.from({ length: 23 }, (_, i) => i);
    const key = (i: number) => Math.abs(i - 11); // distance from the middle item, as rows from the k-space centre
    for (const count of [1, 2, 4, 8, 23]) {
      const picks = stratifiedPicks(items, count, key, mulberry32(7));
      expect(picks.length).toBe(count);
      expect(new Set(picks).size).toBe(count);
      expect(picks[0]).toBe(11);
      // the rest sorted by key (ties in item order): 10, 12, 9, 13, … cut into count − 1 strata
      const rest = items.filter((i) => i !== 11).sort((a, b) => key(a) - key(b) || a - b);
      for (let c = 0; c < count - 1; c++) {
        const lo = Math.floor((c * rest.length) / (count - 1)), hi = Math.floor(((c + 1) * rest.length) / (count - 1));
        expect(rest.slice(lo, hi)).toContain(picks[c + 1]);
      }
    }
    // seeded: the same picks for the same seed; more picks than items gives every item once
    expect(stratifiedPicks(items, 6, key, mulberry32(3))).toEqual(stratifiedPicks(items, 6, key, mulberry32(3)));
    expect(stratifiedPicks([5, 6], 4, (x) => x, mulberry32(1)).sort()).toEqual([5, 6]);
  });

  test("the floor: relL2 at least ESTIMATE_FLOOR × tolerance, the floor stated", () => {
    expect(flooredEstimate({ samples: 16, seed: 1, relL2: 1e-9 }, 1e-6)).toEqual({ samples: 16, seed: 1, relL2: ESTIMATE_FLOOR * 1e-6, floor: ESTIMATE_FLOOR * 1e-6, measured: 1e-9 });
    expect(flooredEstimate({ samples: 16, seed: 1, relL2: 3e-7 }, 1e-6).relL2).toBe(3e-7);
    expect(ESTIMATE_FLOOR).toBeLessThan(1);
  });
});

/** Every bundled preset (sorted by name). */
const PRESETS = listPresets();
const PHANTOMS = ["two-bottle", "torso-slice", "edge-grid", "disc-shim-map", "air-sphere"];

describe("property: every protocol and phantom, small random cases", () => {
  test("fast within the tolerance of direct; the estimate at or above the true error (seeded)", () => {
    expect(PRESETS.length).toBeGreaterThanOrEqual(10);
    let ran = 0;
    const operators = new Set<string>();
    fc.assert(
      fc.property(
        fc.record({
          preset: fc.constantFrom(...PRESETS),
          phantom: fc.constantFrom(...PHANTOMS),
          matrix: fc.constantFrom(12, 16),
          density: fc.constantFrom(1, 2),
          sliceCount: fc.constantFrom(2, 3),
          t2prime: fc.constantFrom(1, 2, 4),
          fat: fc.constantFrom("multi", "single"),
          negative: fc.boolean(),
          phaseOs: fc.constantFrom(0, 0.5),
          tolerance: fc.constantFrom(1e-4, 1e-6),
        }),
        (c) => {
          const sets = [`matrix.read=${c.matrix}`, `matrix.phase=${c.matrix}`, `oversampling.phase=${c.phaseOs}`, ...(c.negative ? ["readoutPolarity=negative"] : [])];
          if (c.preset.startsWith("gre3d")) sets.push("matrix.slice=4");
          if (c.preset.startsWith("rare")) sets.push("echoTrainLength=2");
          let p: ReturnType<typeof prepare>;
          try {
            p = prepare({
              phantom: join(ROOT, "phantoms", `${c.phantom}.json`), protocol: c.preset, sets, out: join(tempDir(), "out"), seed: 1, workers: 1,
              iso: { density: c.density, sliceCount: c.sliceCount, sliceExtent: 3, fatModel: c.fat as "multi" | "single", t2primeIsochromats: c.t2prime, offsetHz: 0 },
            });
          } catch (e) {
            // a protocol these settings make impossible (timing, echo trains) is refused with a reason: not a case
            if (e instanceof UserError) return true;
            throw e;
          }
          const o = { receiverFilter: p.protocol.receiverFilter, tolerance: c.tolerance };
          const fast = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
          const direct = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
          const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
          ran++;
          if (fast.readout.operator !== "fast") return err === 0;
          operators.add(fast.readout.method ?? "");
          const est = fast.readout.estimate!;
          expect(err, `${JSON.stringify(c)}: true error`).toBeLessThan(c.tolerance);
          expect(est.relL2, `${JSON.stringify(c)}: estimate ${est.relL2} against the true error ${err}`).toBeGreaterThanOrEqual(err);
          expect(est.relL2).toBeLessThanOrEqual(c.tolerance);
          expect(est.floor).toBe(ESTIMATE_FLOOR * c.tolerance);
          expect(est.relL2).toBe(Math.max(est.measured!, est.floor!));
          return true;
        },
      ),
      { numRuns: 14, seed: 424242 },
    );
    // the property ran real cases, through more than one fast operator
    expect(ran).toBeGreaterThanOrEqual(8);
    expect(operators.size).toBeGreaterThanOrEqual(2);
  }, 120_000);
});
