/**
 * The ideally spoiled shortcut of the chunk runner (engine/spoiled.ts,
 * runChunkSpoiled) against the general path that plays every op on every
 * isochromat (forced with `general: true`; that path is itself checked
 * against a direct per-isochromat Bloch simulation in engine.test.ts). The
 * shortcut is exact in exact arithmetic, so the two agree to rounding.
 * (The direct readout operator throughout: the fast one, engine/fast.ts, is
 * checked against it in engine-fast.test.ts.)
 */
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { prepare } from "../src/cli/pipeline.js";
import { simulateParallel, simulateSerial } from "../src/engine/node.js";
import type { IsochromatOptions } from "../src/isochromats/index.js";
import fc from "fast-check";
import { relL2, tempDir, writeJson } from "./helpers.js";

/** The two-bottle phantom (water gel and oil: several fat peaks), optionally with a B0 expression (Hz, x in m). */
function phantomFile(b0?: string): string {
  if (!b0) return "phantoms/two-bottle.json";
  const j = JSON.parse(readFileSync("phantoms/two-bottle.json", "utf8")) as Record<string, unknown>;
  j["b0"] = { expression: b0 };
  return writeJson(tempDir(), "phantom.json", j);
}

function prep(sets: string[], opts: { protocol?: string; b0?: string; iso?: Partial<IsochromatOptions> } = {}) {
  return prepare({
    phantom: phantomFile(opts.b0), protocol: opts.protocol ?? "gre-demo-1.5t",
    sets: ["matrix.read=16", "matrix.phase=16", "dummyScans=3", ...sets],
    out: join(tempDir(), "out"), seed: 1,
    iso: { density: 1, sliceCount: 5, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 1, offsetHz: 0, ...opts.iso }, workers: 1,
  });
}

function fastVsGeneral(p: ReturnType<typeof prep>) {
  const fast = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, chunkIsochromats: 256, readout: "direct" });
  const gen = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, chunkIsochromats: 256, general: true });
  return { fast, gen, err: relL2(fast.kspace.re, fast.kspace.im, gen.kspace.re, gen.kspace.im) };
}

describe("ideally spoiled shortcut", () => {
  test.each([
    ["2D GRE, ideal spoiling, sinc pulse, 5 through-slice isochromats", [] as string[], {}],
    ["with a T2′ spread (3 isochromats per tissue and peak)", [], { iso: { t2primeIsochromats: 3 } }],
    ["with B0 varying along x (RF classes per read position)", [], { b0: "150 * x / 0.05" }],
    ["with the oil bottle's fat peaks at 3 T, TE 7 ms, flip 60°, B0 along x and y, T2′ spread", ["field=3 T", "te=7 ms", "flip=60 deg"], { b0: "80 * x / 0.05 - 30 * y / 0.05", iso: { t2primeIsochromats: 2 } }],
  ])("%s: k-space equals the general path within 1e-10 relative L2", (_name, sets, opts) => {
    const p = prep(["spoiling=ideal", ...sets], opts);
    const { fast, gen, err } = fastVsGeneral(p);
    expect(fast.plan.spoiledFast).toBe(true);
    expect(gen.plan.spoiledFast).toBe(false);
    expect(fast.plan.chunks).toBeGreaterThan(2);
    // (a test that can fail: the k-space is not all zeros, and the fat makes several Δf per column)
    expect(gen.kspace.re.some((x) => x !== 0)).toBe(true);
    expect(new Set(p.iso.df).size).toBeGreaterThan(1);
    // exact in exact arithmetic; the shortcut only reorders the floating-point sums
    expect(err).toBeLessThan(1e-10);
  }, 60_000);

  test("with coil sensitivities: each coil equals the general path within 1e-10 relative L2", () => {
    const p = prep(["spoiling=ideal", "receiverFilter=false"]);
    const coils = 2, sens = new Float64Array(2 * coils * p.iso.count);
    let seed = 7;
    for (let k = 0; k < sens.length; k++) {
      seed = (seed * 1103515245 + 12345) % 2147483648;
      sens[k] = seed / 2147483648 - 0.5;
    }
    const fast = simulateSerial(p.seq, p.iso, { receiverFilter: false, coils, sens, readout: "direct" });
    const gen = simulateSerial(p.seq, p.iso, { receiverFilter: false, coils, sens, general: true });
    expect(fast.plan.spoiledFast).toBe(true);
    expect(relL2(fast.kspace.re, fast.kspace.im, gen.kspace.re, gen.kspace.im)).toBeLessThan(1e-10);
  }, 60_000);

  test("on the fast path, 1 and 2 workers give bitwise the serial k-space", async () => {
    const p = prep(["spoiling=ideal"], { b0: "150 * x / 0.05", iso: { t2primeIsochromats: 2 } });
    const serial = simulateSerial(p.seq, p.iso, { receiverFilter: true, chunkIsochromats: 256, readout: "direct" });
    expect(serial.plan.spoiledFast).toBe(true);
    for (const workers of [1, 2]) {
      const { kspace, plan } = await simulateParallel(p.seq, p.iso, { receiverFilter: true, workers, chunkIsochromats: 256, readout: "direct" });
      expect(plan.spoiledFast).toBe(true);
      expect(plan.chunks).toBeGreaterThan(2);
      expect(Buffer.from(kspace.re.buffer).equals(Buffer.from(serial.kspace.re.buffer))).toBe(true);
      expect(Buffer.from(kspace.im.buffer).equals(Buffer.from(serial.kspace.im.buffer))).toBe(true);
    }
  }, 60_000);

  test("RF-spoiled GRE (no ideal spoil, a spoiler moment left at every pulse) does not take the shortcut and gives the general path's bits", () => {
    const p = prep(["spoiling=rf"], { protocol: "gre-demo-1.5t" });
    const a = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter });
    const b = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, general: true });
    expect(a.plan.spoiledFast).toBe(false);
    expect(a.plan.classState).toBe(false);
    expect(a.kspace.re.some((x) => x !== 0)).toBe(true);
    expect(Buffer.from(a.kspace.re.buffer).equals(Buffer.from(b.kspace.re.buffer))).toBe(true);
    expect(Buffer.from(a.kspace.im.buffer).equals(Buffer.from(b.kspace.im.buffer))).toBe(true);
  }, 60_000);

  test.each([
    ["spin echo (two pulses per TR, no in-plane moment at the refocusing pulse)", [] as string[], "se-t2-1.5t", undefined],
    ["spin echo with B0 and a T2′ spread (refocused)", [] as string[], "se-t2-1.5t", "40 * x / 0.05 - 15 * y / 0.05"],
    ["bSSFP (every gradient balanced within the TR)", [], "bssfp-1.5t", undefined],
    ["bSSFP with B0 (off-resonant classes: the banding's Δf dependence)", [], "bssfp-1.5t", "60 * x / 0.05"],
  ])("%s: the state at every pulse is per RF class (the shortcut, the pulse on the whole state), equal to the general path within 1e-10", (_name, sets, protocol, b0) => {
    const p = prep(sets, { protocol, b0, iso: { t2primeIsochromats: b0 ? 3 : 1 } });
    const { fast, gen, err } = fastVsGeneral(p);
    expect(fast.plan.spoiledFast).toBe(false);
    expect(fast.plan.classState).toBe(true);
    expect(gen.plan.classState).toBe(false);
    expect(gen.kspace.re.some((x) => x !== 0)).toBe(true);
    expect(err).toBeLessThan(1e-10);
    // and the fast operator from the same class playback, against the general path (an oracle that shares nothing with it)
    const f = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
    expect(f.readout.operator).toBe("fast");
    expect(relL2(f.kspace.re, f.kspace.im, gen.kspace.re, gen.kspace.im)).toBeLessThanOrEqual(1e-6);
  }, 60_000);

  test("RARE (read prephaser before the first refocusing pulse: an in-plane moment there) keeps the general path", () => {
    const p = prep(["echoTrainLength=4", "te=40 ms"], { protocol: "rare-t2-1.5t" });
    const { fast, err } = fastVsGeneral(p);
    expect(fast.plan.classState).toBe(false);
    expect(err).toBe(0);
  }, 60_000);
});

describe("the readout fold on the class-state shortcut (EPI, spin-echo EPI)", () => {
  test.each([["epi-1.5t"], ["epi-se-1.5t"]])("%s: the fold from the shortcut's group sums within 1e-6 of the general path; from the cells, --readout fast runs the fold", async (protocol) => {
    const p = prep([], { protocol, b0: "40 * x / 0.05", iso: { t2primeIsochromats: 3 } });
    const o = { receiverFilter: p.protocol.receiverFilter, chunkIsochromats: 256 };
    const gen = simulateSerial(p.seq, p.iso, { ...o, general: true });
    const f = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
    expect(f.plan.classState).toBe(true);
    expect(f.readout.operator).toBe("fast");
    expect(f.readout.method).toMatch(/time-segmented fold/);
    expect(gen.kspace.re.some((x) => x !== 0)).toBe(true);
    const e = relL2(f.kspace.re, f.kspace.im, gen.kspace.re, gen.kspace.im);
    expect(e).toBeLessThanOrEqual(1e-6);
    expect(f.readout.estimate!.relL2 * 2).toBeGreaterThanOrEqual(e);
    // the streamed entry (simulateCells, as the command line): the spoiled operator does not cover EPI's readouts,
    // and the stored isochromats go to the fold asked for, not to the direct operator
    const { serialExecutor, simulateCells } = await import("../src/engine/index.js");
    const c = await simulateCells(serialExecutor(), p.seq, p.cells, () => p.iso, { ...o, readout: "fast" });
    expect(c.readout.operator).toBe("fast");
    expect(c.readout.method).toMatch(/time-segmented fold/);
    expect(relL2(c.kspace.re, c.kspace.im, gen.kspace.re, gen.kspace.im)).toBeLessThanOrEqual(1e-6);
  }, 60_000);
});

describe("property: the class state at every pulse, on random small spin echoes and bSSFP", () => {
  test("the shortcut within 1e-10 and the fast operator within 1e-6 of the general path (every op on every isochromat), the estimate covering the fast error (seeded)", () => {
    fc.assert(
      fc.property(
        fc.record({
          kind: fc.constantFrom("se", "bssfp"),
          b0: fc.integer({ min: -80, max: 80 }),
          spread: fc.constantFrom(1, 3),
          field: fc.constantFrom("1.5 T", "3 T"),
          flip: fc.integer({ min: 20, max: 80 }),
          te: fc.constantFrom(15, 25, 40),
          tr: fc.constantFrom(4, 6),
          matrix: fc.constantFrom(8, 12),
        }),
        (c) => {
          const sets = [`matrix.read=${c.matrix}`, `matrix.phase=${c.matrix}`, `field=${c.field}`];
          if (c.kind === "se") sets.push(`te=${c.te} ms`, "tr=300 ms");
          else sets.push(`tr=${c.tr} ms`, `te=${c.tr / 2} ms`, `flip=${c.flip} deg`);
          const p = prepare({
            phantom: phantomFile(`${c.b0} * x / 0.05 + ${c.b0 / 3} * y / 0.05`), protocol: c.kind === "se" ? "se-t2-1.5t" : "bssfp-1.5t",
            sets: [...sets, "dummyScans=3"], out: join(tempDir(), "out"), seed: 1,
            iso: { density: 1, sliceCount: 4, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: c.spread, offsetHz: 0 }, workers: 1,
          });
          const o = { receiverFilter: p.protocol.receiverFilter, chunkIsochromats: 256 };
          const gen = simulateSerial(p.seq, p.iso, { ...o, general: true });
          const d = simulateSerial(p.seq, p.iso, { ...o, readout: "direct" });
          const f = simulateSerial(p.seq, p.iso, { ...o, readout: "fast" });
          const eD = relL2(d.kspace.re, d.kspace.im, gen.kspace.re, gen.kspace.im);
          const eF = relL2(f.kspace.re, f.kspace.im, gen.kspace.re, gen.kspace.im);
          if (!d.plan.classState || !gen.kspace.re.some((x) => x !== 0)) return false;
          if (f.readout.operator !== "fast") return eD < 1e-10 && eF < 1e-10;
          return eD < 1e-10 && eF <= 1e-6 && f.readout.estimate!.relL2 >= eF;
        },
      ),
      { numRuns: 8, seed: 5 },
    );
  }, 60_000);
});
