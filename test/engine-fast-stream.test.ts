/**
 * The fast readout operator with its weights streamed from the sampled cells
 * (engine/fast-stream.ts, executor simulateCells: no isochromat stored)
 * against the direct operator on the stored isochromats (`readout:
 * "direct"`, the oracle: itself checked against per-isochromat Bloch
 * simulation and closed forms in engine.test.ts and engine-spoiled.test.ts).
 * Time segmentation after Noll et al. 1991 (IEEE TMI 10:629) with
 * least-squares interpolators after Sutton, Noll & Fessler 2003 (IEEE TMI
 * 22:178). Also: the cell sampling expands to exactly the isochromats it
 * counts, and a B0 model (expression or .npy field map) streams too, its
 * RF classes hashed from the cells: the same classes as the stored
 * isochromats' (plan.ts rfClasses), so the same k-space as the fast operator
 * on stored isochromats; too many classes send the run to the stored path.
 */
import { readFileSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import fc from "fast-check";
import { describe, expect, test } from "vitest";
import { prepare } from "../src/cli/pipeline.js";
import { serialExecutor, simulateCells, simulateSerial } from "../src/engine/node.js";
import { expandCells, type IsochromatOptions } from "../src/isochromats/index.js";
import { relL2, tempDir, writeJson } from "./helpers.js";
import { CellStream, coherenceSpan, DfNodes, INTERP_ORDER, setEstimateRegrouping, setInterpolationMinClasses, stepFor } from "../src/engine/fast-stream.js";
import { rfClasses } from "../src/engine/plan.js";
import { encodeNpy } from "../src/io/npy.js";

function phantomFile(b0?: string | "npy"): string {
  if (!b0) return "phantoms/two-bottle.json";
  const j = JSON.parse(readFileSync("phantoms/two-bottle.json", "utf8")) as Record<string, unknown>;
  const dir = tempDir();
  if (b0 === "npy") {
    // a small 2-D map (5 × 6 points, 2 cm apart, z-independent) of seeded pseudo-random values in −40 … 40 Hz, interpolated trilinearly
    const data: number[] = [];
    let x = 12345;
    for (let i = 0; i < 30; i++) {
      x = (x * 1103515245 + 12345) % 2147483648;
      data.push((x / 2147483648) * 80 - 40);
    }
    writeFileSync(join(dir, "map.npy"), encodeNpy({ dtype: "float64", shape: [5, 6], data }));
    j["b0"] = { fieldMap: { file: "map.npy", origin: ["-5 cm", "-4 cm", "0 cm"], spacing: ["2 cm", "2 cm", "1 cm"] } };
  } else j["b0"] = { expression: b0 };
  return writeJson(dir, "phantom.json", j);
}

function prep(sets: string[], opts: { protocol?: string; b0?: string; phantom?: string; iso?: Partial<IsochromatOptions>; matrix?: number } = {}) {
  const m = opts.matrix ?? 16;
  return prepare({
    phantom: opts.phantom ?? phantomFile(opts.b0), protocol: opts.protocol ?? "gre-demo-1.5t",
    sets: [`matrix.read=${m}`, `matrix.phase=${m}`, "dummyScans=3", ...sets],
    out: join(tempDir(), "out"), seed: 1,
    iso: { density: 1, sliceCount: 5, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: 1, offsetHz: 0, ...opts.iso }, workers: 1,
  });
}

/** Runs simulateCells; `stored` counts the calls that made the isochromats one by one. */
async function streamed(p: ReturnType<typeof prep>, readout: "fast" | "auto" = "fast", tolerance?: number) {
  let stored = 0;
  const r = await simulateCells(serialExecutor(), p.seq, p.cells, () => (stored++, p.iso), { receiverFilter: p.protocol.receiverFilter, readout, tolerance });
  return { ...r, stored };
}

describe("streamed fast operator against the direct operator", () => {
  test.each([
    ["water and multi-peak fat (two bottles)", [] as string[], {}],
    ["T2′ spread (4 per voxel), density 2", [], { iso: { t2primeIsochromats: 4, density: 2 } }],
    ["3 T, TE 7 ms, flip 60°, T2′ spread", ["field=3 T", "te=7 ms", "flip=60 deg"], { iso: { t2primeIsochromats: 2 } }],
    ["read and phase oversampling, partial Fourier along phase", ["oversampling.read=2", "oversampling.phase=0.25", "partialFourier.phase=0.75"], {}],
    ["partial echo", ["partialFourier.read=0.75"], {}],
    ["torso (several tissues), preset gre-t1-3t", [] as string[], { protocol: "gre-t1-3t", phantom: "phantoms/torso-slice.json", iso: { t2primeIsochromats: 4 }, matrix: 24 }],
  ])("%s: within the tolerance, no isochromat stored, estimate bounds the error", async (_name, sets, opts) => {
    const p = prep(["spoiling=ideal", ...sets], opts);
    const fast = await streamed(p);
    expect(fast.readout.operator).toBe("fast");
    expect(fast.readout.weights).toMatch(/streamed/);
    // the streamed run never asked for the isochromats one by one
    expect(fast.stored).toBe(0);
    const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    expect(direct.kspace.re.some((x) => x !== 0)).toBe(true);
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-6);
    expect(fast.readout.estimate!.relL2).toBeGreaterThanOrEqual(err);
    // and agrees with the fast operator on stored isochromats within the two tolerances
    const stored = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
    expect(relL2(fast.kspace.re, fast.kspace.im, stored.kspace.re, stored.kspace.im)).toBeLessThan(2e-6);
  }, 60_000);

  test.each([
    ["B0 expression (linear gradient + offset)", "60 * x / 0.05 + 15"],
    ["B0 from a small .npy field map", "npy"],
  ])("%s, with multi-peak fat and a T2′ spread: streamed, within the tolerance of direct, estimate bounds the error", async (_name, b0) => {
    const p = prep(["spoiling=ideal"], { b0, iso: { t2primeIsochromats: 2 } });
    // the hashed classes are those of the stored isochromats (same count, same parameters as a set)
    const s = new CellStream(p.cells);
    const ref = rfClasses(p.iso);
    expect(s.tooMany).toBeNull();
    expect(s.spec.classes).toBe(ref.classes);
    expect(s.spec.classes).toBeGreaterThan(p.cells.columns); // Δf varies per cell: more classes than the tissue enumeration would give
    const keys = (c: { classes: number; classW: Float64Array; classDf: Float64Array; classR1: Float64Array; classR2: Float64Array }) =>
      Array.from({ length: c.classes }, (_, i) => `${c.classW[i]}|${c.classDf[i]}|${c.classR1[i]}|${c.classR2[i]}`).sort();
    expect(keys(s.spec)).toEqual(keys(ref));
    const fast = await streamed(p);
    expect(fast.readout.operator).toBe("fast");
    expect(fast.readout.weights).toMatch(/streamed/);
    expect(fast.stored).toBe(0);
    const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-6);
    expect(fast.readout.estimate!.relL2).toBeGreaterThanOrEqual(err);
    // the B0 model matters: without it the k-space differs by far more than the tolerance
    const noB0 = await streamed(prep(["spoiling=ideal"], { iso: { t2primeIsochromats: 2 } }));
    expect(relL2(noB0.kspace.re, noB0.kspace.im, direct.kspace.re, direct.kspace.im)).toBeGreaterThan(1e-3);
  }, 60_000);

  test("a B0 model with more classes than the stream allows: refused with a reason (the caller then stores the isochromats)", () => {
    const p = prep(["spoiling=ideal"], { b0: "60 * x / 0.05" });
    const s = new CellStream(p.cells, null, 10);
    expect(s.tooMany).toMatch(/more than 10 RF classes/);
    expect(new CellStream(p.cells).tooMany).toBeNull();
  });

  test("RARE: not covered by the streamed operator; the stored isochromats go to the time-segmented fold (engine/fold.ts), within the tolerance of direct", async () => {
    const p = prep(["echoTrainLength=4", "te=40 ms"], { protocol: "rare-t2-1.5t" });
    const a = await streamed(p);
    const b = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    expect(a.stored).toBe(1);
    expect(a.readout.operator).toBe("fast");
    expect(a.readout.method).toMatch(/time-segmented fold/);
    let n = 0, d = 0;
    for (let k = 0; k < b.kspace.re.length; k++) {
      n += (a.kspace.re[k]! - b.kspace.re[k]!) ** 2 + (a.kspace.im[k]! - b.kspace.im[k]!) ** 2;
      d += b.kspace.re[k]! ** 2 + b.kspace.im[k]! ** 2;
    }
    expect(d).toBeGreaterThan(0);
    expect(Math.sqrt(n / d)).toBeLessThanOrEqual(1e-6);
  }, 60_000);

  test("cells expand to exactly the counted isochromats, columns and m0 total", () => {
    const p = prep([], { phantom: "phantoms/torso-slice.json", protocol: "gre-t1-3t", iso: { t2primeIsochromats: 4, density: 2 }, matrix: 24 });
    const iso = expandCells(p.cells);
    expect(iso.count).toBe(p.cells.count);
    expect(iso.columns).toBe(p.cells.columns);
    expect(iso.count).toBeGreaterThan(1000);
    // Σ m0 over the isochromats = Σ over cells of pd·fraction·(Σ peak amplitudes = 1)·(Σ bin weights over the voxel's columns)·wWeight:
    // summed directly from the cell list (the T2′ weights of a voxel's d² columns add to 1, spread.ts)
    let m0 = 0;
    for (let i = 0; i < iso.count; i++) m0 += iso.m0[i]!;
    let cellSum = 0;
    const ctx = p.cells.ctx;
    for (let col = 0; col < p.cells.columns; col++) {
      for (let e = p.cells.entStart[col]!; e < p.cells.entStart[col + 1]!; e++) {
        const ti = p.cells.entTissue[e]!, as = ctx.assign[ti]![p.cells.colSub[col]!]!;
        let wsum = 0;
        for (const w of as.weight) wsum += w;
        const amp = ctx.peaks[ti]!.amp.reduce((x, y) => x + y, 0);
        cellSum += ctx.pd[ti]! * p.cells.entFrac[e]! * amp * wsum * ctx.wWeight;
      }
    }
    expect(Math.abs(m0 - cellSum)).toBeLessThan(1e-9 * Math.abs(cellSum));
  }, 60_000);
});

describe("streamed fast operator with coil sensitivities (dataset)", () => {
  test("4 loops + the uniform coil: within the tolerance of the direct operator with per-isochromat sensitivities, estimate bounds the error", async () => {
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal", "fov.read=12 cm", "fov.phase=12 cm"], { iso: { t2primeIsochromats: 2, density: 2 } });
    const array = { elements: 4, rows: 1, loopRadius: 0.04, arrayRadius: 0.15, rowSpacing: 0, zCentre: 0 };
    for (const receiverFilter of [true, false]) {
      const fast = await simulateCoilsPlanned(p.seq, p, array, receiverFilter, serialExecutor(), undefined, { readout: "fast" });
      expect(fast.readout[0]!.operator).toBe("fast");
      expect(fast.readout[0]!.weights).toMatch(/streamed/);
      expect(fast.kspace.coils).toBe(5);
      // the oracle: every isochromat with its own Biot–Savart sensitivity through the direct readout
      const direct = await simulateCoilsPlanned(p.seq, p.iso, array, receiverFilter, serialExecutor(), undefined, { readout: "direct" });
      expect(direct.readout[0]!.operator).toBe("direct");
      const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
      expect(err).toBeLessThan(1e-6);
      expect(fast.readout[0]!.estimate!.relL2).toBeGreaterThanOrEqual(err);
      // each loop's k-space differs from the uniform coil's (the sensitivities were applied)
      const n = direct.kspace.re.length / 5;
      expect(relL2(direct.kspace.re.subarray(n, 2 * n), direct.kspace.im.subarray(n, 2 * n), direct.kspace.re.subarray(0, n), direct.kspace.im.subarray(0, n))).toBeGreaterThan(0.05);
    }
  }, 60_000);
});

describe("the estimate's column sums with coils, regrouped per read position", () => {
  // The regrouped sums (per read position: the moments of a column of one tissue, the cells of a column of
  // several) against the same direct sums written out column by column and phased (the switch off): the
  // same k-space bit for bit (the estimate changes no number of it), and the same estimate up to rounding
  // and the terms below a thousandth of the fold's cut that the regrouped sums leave out.
  test("torso (uniform and partial-volume columns), 4 loops + the uniform coil: the same estimate as the sums written out", async () => {
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal"], { protocol: "gre-t1-3t", phantom: "phantoms/torso-slice.json", iso: { t2primeIsochromats: 2, density: 2 }, matrix: 24 });
    const array = { elements: 4, rows: 1, loopRadius: 0.08, arrayRadius: 0.2, rowSpacing: 0, zCentre: 0 };
    const run = () => simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast", tolerance: 1e-8 });
    const grouped = await run();
    const was = setEstimateRegrouping(false);
    let plain: Awaited<ReturnType<typeof run>>;
    try {
      plain = await run();
    } finally {
      setEstimateRegrouping(was);
    }
    expect(grouped.readout[0]!.operator).toBe("fast");
    expect(Buffer.from(grouped.kspace.re.buffer).equals(Buffer.from(plain.kspace.re.buffer))).toBe(true);
    expect(Buffer.from(grouped.kspace.im.buffer).equals(Buffer.from(plain.kspace.im.buffer))).toBe(true);
    const eg = grouped.readout[0]!.estimate!.relL2, ep = plain.readout[0]!.estimate!.relL2;
    expect(ep).toBeGreaterThan(0);
    expect(Math.abs(eg - ep)).toBeLessThan(0.01 * ep);
  }, 60_000);
});

describe("the estimate's one-coil column sums, regrouped per read position", () => {
  // One coil: the columns of one tissue through the slice add fp × their tissue's through-slice sums into one
  // accumulator per table and read position (OneCoilTables), the phases by grid index; against every column's
  // sums written out and phased one by one (the switch off). The same k-space bit for bit, and the same estimate
  // up to rounding (the same direct sum in another order).
  test.each([
    ["two bottles (water and multi-peak fat), density 2", [] as string[], { iso: { density: 2 } }],
    ["torso, gre-t1-3t, T2′ spread 2, receiver filter on (read oversampling kept)", [] as string[], { protocol: "gre-t1-3t", phantom: "phantoms/torso-slice.json", iso: { t2primeIsochromats: 2, density: 2 }, matrix: 24 }],
  ])("%s: the same estimate as the sums written out", async (_name, sets, opts) => {
    const p = prep(sets, opts);
    const grouped = await streamed(p, "fast", 1e-8);
    const was = setEstimateRegrouping(false);
    let plain: Awaited<ReturnType<typeof streamed>>;
    try {
      plain = await streamed(p, "fast", 1e-8);
    } finally {
      setEstimateRegrouping(was);
    }
    expect(grouped.readout.operator).toBe("fast");
    expect(Buffer.from(grouped.kspace.re.buffer).equals(Buffer.from(plain.kspace.re.buffer))).toBe(true);
    const eg = grouped.readout.estimate!.relL2, ep = plain.readout.estimate!.relL2;
    expect(ep).toBeGreaterThan(0);
    expect(Math.abs(eg - ep)).toBeLessThan(1e-6 * ep);
  }, 60_000);
});

describe("streamed fast operator with coil sensitivities and a B0 model", () => {
  // a B0 model leaves the stream no per-tissue tables (its classes vary per cell), so every column goes to the
  // per-cell fold — which once read a table that was not there
  test("4 loops + the uniform coil, B0 expression: within the tolerance of the direct operator, estimate bounds the error", async () => {
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal", "fov.read=12 cm", "fov.phase=12 cm"], { b0: "400 * x + 250 * y", matrix: 24, iso: { density: 2, sliceCount: 4 } });
    const array = { elements: 4, rows: 1, loopRadius: 0.04, arrayRadius: 0.15, rowSpacing: 0, zCentre: 0 };
    const fast = await simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast" });
    expect(fast.readout[0]!.operator).toBe("fast");
    const direct = await simulateCoilsPlanned(p.seq, p.iso, array, true, serialExecutor(), undefined, { readout: "direct" });
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-6);
    expect(fast.readout[0]!.estimate!.relL2).toBeGreaterThanOrEqual(err);
  }, 60_000);
});

describe("through-slice sensitivity terms of the streamed fold (slice-basis.ts throughSliceBasis)", () => {
  test("basis orthonormal; torso (mixed-tissue columns) with the array off the slice centre: within the tolerance of direct, estimate bounds the error, fewer terms than cells", async () => {
    const { throughSliceBasis } = await import("../src/engine/slice-basis.js");
    // orthonormal rows (ΨΨᵀ = I): the moment form is exact when every term is kept
    const w = Array.from({ length: 12 }, (_, c) => -0.006875 + 0.00125 * c), n = w.length, psi = throughSliceBasis(w);
    let worst = 0;
    for (let p = 0; p < n; p++) for (let k = 0; k < n; k++) {
      let d = 0;
      for (let c = 0; c < n; c++) d += psi[p * n + c]! * psi[k * n + c]!;
      worst = Math.max(worst, Math.abs(d - (p === k ? 1 : 0)));
    }
    expect(worst).toBeLessThan(1e-12);
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal"], { protocol: "gre-t1-3t", phantom: "phantoms/torso-slice.json", matrix: 12, iso: { sliceCount: 6 } });
    // loops 4 mm above the slice centre: the sensitivity is not even through the slice
    const array = { elements: 4, rows: 1, loopRadius: 0.1, arrayRadius: 0.2, rowSpacing: 0, zCentre: 0.004 };
    const direct = await simulateCoilsPlanned(p.seq, p.iso, array, true, serialExecutor(), undefined, { readout: "direct" });
    for (const tolerance of [1e-4]) {
      const fast = await simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast", tolerance });
      const rep = fast.readout[0]!;
      expect(rep.operator).toBe("fast");
      const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
      expect(err).toBeLessThan(tolerance);
      expect(rep.estimate!.relL2).toBeGreaterThanOrEqual(err);
      // the terms were truncated (fewer than the 6 cells through the slice), each pair within tolerance/split
      const t = rep.sensitivityTerms!;
      expect(t.pairs).toBeGreaterThan(0);
      expect(t.of).toBe(6);
      expect(t.meanKept).toBeLessThan(t.of);
      expect(t.maxBound).toBeLessThanOrEqual(tolerance / rep.split!);
    }
  }, 60_000);
});

describe("property: random small protocols and sampling", () => {
  test("streamed fast within the tolerance of direct, estimate bounds the error (seeded)", async () => {
    let fastRuns = 0;
    await fc.assert(
      fc.asyncProperty(
        fc.record({
          matrix: fc.constantFrom(12, 16),
          flip: fc.integer({ min: 10, max: 90 }),
          te: fc.constantFrom(8, 10, 14),
          osRead: fc.constantFrom(1, 2),
          pf: fc.constantFrom(1, 0.75),
          density: fc.constantFrom(1, 2),
          sliceCount: fc.integer({ min: 3, max: 6 }),
          t2prime: fc.constantFrom(1, 2, 4),
          torso: fc.boolean(),
          tolerance: fc.constantFrom(1e-4, 1e-6),
        }),
        async (c) => {
          const p = prep(
            ["spoiling=ideal", `flip=${c.flip} deg`, `te=${c.te} ms`, `oversampling.read=${c.osRead}`, `partialFourier.phase=${c.pf}`, ...(c.torso ? ["field=3 T"] : [])],
            { matrix: c.matrix, iso: { density: c.density, sliceCount: c.sliceCount, t2primeIsochromats: c.t2prime }, ...(c.torso ? { phantom: "phantoms/torso-slice.json", protocol: "gre-t1-3t" } : {}) },
          );
          const fast = await streamed(p, "fast", c.tolerance);
          const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
          if (fast.readout.operator !== "fast") {
            // a refusal must say why and give the direct operator's k-space
            expect(fast.readout.fallback).toBeTruthy();
            return;
          }
          expect(fast.stored).toBe(0);
          fastRuns++;
          const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
          expect(err).toBeLessThan(c.tolerance);
          expect(fast.readout.estimate!.relL2).toBeGreaterThanOrEqual(err);
        },
      ),
      { numRuns: 8, seed: 11 },
    );
    // the property exercised the streamed operator, not only refusals
    expect(fastRuns).toBeGreaterThanOrEqual(6);
  }, 120_000);
});

describe("the a-posteriori estimate's reference sums", () => {
  // The estimate compares the fast k-space with direct sums on a sample subset; its column sums are regrouped
  // per cell (fast-stream.ts columnEstimator: a column of one tissue, or of several tissues through the slice,
  // from per-cell tables). At a tight tolerance the fast result equals the direct operator's to about 1e-10, so
  // an estimate far above that means the reference sums are not the direct ones. Oracle: the direct operator.
  test("torso slice with partial-volume columns and a T2′ spread: estimate near the true error at tolerance 1e-10", async () => {
    const p = prep(["slice.thickness=4 mm"], { protocol: "gre-t1-3t", phantom: "phantoms/torso-slice.json", matrix: 32, iso: { density: 2, sliceCount: 6, t2primeIsochromats: 3 } });
    const fast = await streamed(p, "fast", 1e-10);
    const direct = await simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    expect(fast.readout.operator).toBe("fast");
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-9);
    // the estimate: 3 × the subset's relative error, itself of the order of the true error (plus rounding)
    expect(fast.readout.estimate!.relL2).toBeLessThan(1e-8);
  }, 60_000);
});

describe("a B0 model with very many RF classes: Δf interpolated between nodes (fast-stream.ts DfNodes)", () => {
  // Every cell has its own Δf, so the exact classes are as many as the isochromats; the stream instead puts nodes in
  // Δf (per through-slice index and tissue) and replaces each isochromat by the INTERP_ORDER isochromats at the nodes
  // around its Δf, weighted by the Lagrange polynomials (the Lagrange remainder bounds the error from the coherence
  // span, common practice). The oracle: the direct operator on the stored isochromats with their exact Δf.
  const forced = async <T>(f: () => Promise<T>): Promise<T> => {
    const was = setInterpolationMinClasses(0);
    try {
      return await f();
    } finally {
      setInterpolationMinClasses(was);
    }
  };
  const torsoB0 = () => {
    const j = JSON.parse(readFileSync("phantoms/torso-slice.json", "utf8")) as Record<string, unknown>;
    j["b0"] = { expression: "200 * x + 150 * y + 12" };
    return writeJson(tempDir(), "torso-b0.json", j);
  };
  test.each<[string, string[], { b0?: string; torso?: boolean; protocol?: string; matrix?: number; iso: Partial<IsochromatOptions> }]>([
    ["B0 expression, multi-peak fat, T2′ spread", ["spoiling=ideal"], { b0: "60 * x / 0.05 + 300 * y * y / 0.0025 + 15", iso: { t2primeIsochromats: 4 } }],
    ["B0 from a .npy field map, TE 14 ms, 3 T", ["spoiling=ideal", "field=3 T", "te=14 ms", "tr=40 ms"], { b0: "npy", iso: { t2primeIsochromats: 2 } }],
    ["torso, gre-t1-3t, B0 expression", ["spoiling=ideal"], { protocol: "gre-t1-3t", torso: true, matrix: 20, iso: { t2primeIsochromats: 2 } }],
    // B0 varying through the slice too: a column's cells differ in B0, so no table summed over w (per cell instead)
    ["B0 expression with a part along the slice", ["spoiling=ideal"], { b0: "60 * x / 0.05 + 15 + 4000 * z", iso: { t2primeIsochromats: 2 } }],
  ])("%s: within the tolerance of direct, the estimate (with the probes' error) bounds the error", async (_name, sets, opts) => {
    const p = prep(sets, { ...opts, phantom: opts.torso ? torsoB0() : undefined });
    const fast = await forced(() => streamed(p));
    const rep = fast.readout;
    expect(rep.operator).toBe("fast");
    expect(fast.stored).toBe(0);
    const ip = rep.b0Interpolation!;
    expect(ip.order).toBe(INTERP_ORDER);
    expect(ip.probes).toBeGreaterThan(0);
    expect(ip.maxRelError).toBeLessThan(1e-6 / 8);
    // columns folded from the shift tables (each entry interpolated in its B0 shift), the rest per node
    expect(ip.tableColumns).toBeGreaterThan(0);
    expect(ip.tableColumns + ip.nodeColumns).toBe(p.cells.columns);
    // the torso reaches where the receiver filter rolls off: those columns fold per node, in the same run
    if (opts.torso) expect(ip.nodeColumns).toBeGreaterThan(0);
    const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-6);
    expect(rep.estimate!.relL2).toBeGreaterThanOrEqual(err);
    // the same case with the exact classes (no interpolation): also within the tolerance
    const exact = await streamed(p);
    expect(exact.readout.b0Interpolation).toBeUndefined();
    expect(relL2(exact.kspace.re, exact.kspace.im, direct.kspace.re, direct.kspace.im)).toBeLessThan(1e-6);
  }, 60_000);

  test("4 loops + the uniform coil (dataset), B0 expression: within the tolerance of the direct operator with per-isochromat sensitivities", async () => {
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal", "fov.read=12 cm", "fov.phase=12 cm"], { b0: "400 * x + 250 * y + 300 * x * y / 0.05", matrix: 20, iso: { density: 2, sliceCount: 4, t2primeIsochromats: 2 } });
    const array = { elements: 4, rows: 1, loopRadius: 0.04, arrayRadius: 0.15, rowSpacing: 0, zCentre: 0 };
    const fast = await forced(() => simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast" }));
    const rep = fast.readout[0]!;
    expect(rep.operator).toBe("fast");
    expect(rep.weights).toMatch(/streamed/);
    expect(rep.b0Interpolation!.maxRelError).toBeLessThan(1e-6 / 8);
    const direct = await simulateCoilsPlanned(p.seq, p.iso, array, true, serialExecutor(), undefined, { readout: "direct" });
    const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeLessThan(1e-6);
    expect(rep.estimate!.relL2).toBeGreaterThanOrEqual(err);
  }, 60_000);

  test("loops off the slice centre, B0 in-plane: columns of one tissue fold on the through-slice moments of the interpolated tables, within the tolerance of direct, estimate bounds the error", async () => {
    const { simulateCoilsPlanned } = await import("../src/dataset/simulate.js");
    const p = prep(["spoiling=ideal", "fov.read=12 cm", "fov.phase=12 cm"], { b0: "400 * x + 250 * y + 300 * x * y / 0.05", matrix: 20, iso: { density: 2, sliceCount: 6, t2primeIsochromats: 2 } });
    // loops 4 mm above the slice centre: the sensitivity is not even through the slice, so the moments beyond the first count
    const array = { elements: 4, rows: 1, loopRadius: 0.05, arrayRadius: 0.15, rowSpacing: 0, zCentre: 0.004 };
    const direct = await simulateCoilsPlanned(p.seq, p.iso, array, true, serialExecutor(), undefined, { readout: "direct" });
    for (const tolerance of [1e-6, 1e-4]) {
      const fast = await forced(() => simulateCoilsPlanned(p.seq, p, array, true, serialExecutor(), undefined, { readout: "fast", tolerance }));
      const rep = fast.readout[0]!;
      expect(rep.operator).toBe("fast");
      expect(rep.b0Interpolation!.tableColumns).toBeGreaterThan(0);
      // the moment terms were used (only this path counts them where a B0 model is interpolated) and truncated
      const t = rep.sensitivityTerms!;
      expect(t.pairs).toBeGreaterThan(0);
      expect(t.of).toBe(6);
      expect(t.meanKept).toBeLessThan(t.of);
      expect(t.maxBound).toBeLessThanOrEqual(tolerance / rep.split!);
      const err = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
      expect(err).toBeLessThan(tolerance);
      expect(rep.estimate!.relL2).toBeGreaterThanOrEqual(err);
    }
  }, 60_000);

  test("the interpolation is what keeps the error small: nodes 8× further apart fail the tolerance, and the probes see it", async () => {
    const p = prep(["spoiling=ideal", "te=14 ms", "tr=40 ms"], { b0: "60 * x / 0.05 + 300 * y * y / 0.0025 + 15", iso: { t2primeIsochromats: 2 } });
    const direct = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "direct" });
    // a tolerance 8^p looser sets nodes 8× further apart (the step grows as tolerance^(1/p), p = INTERP_ORDER)
    const coarse = await forced(() => streamed(p, "fast", 1e-6 * 8 ** INTERP_ORDER));
    const ip = coarse.readout.b0Interpolation!;
    expect(ip.stepHz).toBeGreaterThan(7 * stepFor(1e-6 / 16, ip.span));
    const err = relL2(coarse.kspace.re, coarse.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(err).toBeGreaterThan(1e-6);
    expect(coarse.readout.estimate!.relL2).toBeGreaterThanOrEqual(err);
  }, 60_000);

  test("coherenceSpan: from the first pulse after an ideal spoil to the end of its readout", () => {
    const pulses = [{ duration: 0.002 }];
    const blocks = [
      { kind: "rf", pulse: 0, phase: 0 }, { kind: "free", duration: 0.003, area: [0, 0, 0] },
      { kind: "adc", samples: 100, dwell: 1e-5, grad: [0, 0, 0], row: 0, phase: 0, weight: 1 }, { kind: "spoil" },
      { kind: "free", duration: 0.01, area: [0, 0, 0] },
      { kind: "rf", pulse: 0, phase: 0 }, { kind: "free", duration: 0.004, area: [0, 0, 0] },
      { kind: "adc", samples: 100, dwell: 1e-5, grad: [0, 0, 0], row: 1, phase: 0, weight: 1 }, { kind: "spoil" },
    ] as const;
    expect(coherenceSpan({ blocks: blocks as never, pulses })).toBeCloseTo(0.002 + 0.004 + 0.001, 12);
  });

  test("Lagrange weights: exact on polynomials of degree < INTERP_ORDER, and sum to 1", () => {
    const lo = new Float64Array([-10]), base = new Int32Array([0]), gM = new Int32Array([40]);
    const nodes = new DfNodes(0.5, lo, base, gM, new Float64Array(0));
    const wt = new Float64Array(INTERP_ORDER);
    const half = INTERP_ORDER / 2 - 1;
    const poly = (x: number) => 0.3 - 0.2 * x + 0.01 * x ** 2 + 0.003 * x ** 5;
    for (const df of [-9.93, -3.1, 0, 0.25, 7.77]) {
      const k0 = nodes.expand(df, 0, wt);
      let sum = 0, val = 0;
      for (let i = 0; i < INTERP_ORDER; i++) {
        sum += wt[i]!;
        val += wt[i]! * poly(-10 + (k0 + i - half) * 0.5);
      }
      expect(Math.abs(sum - 1)).toBeLessThan(1e-12);
      expect(Math.abs(val - poly(df))).toBeLessThan(1e-9);
    }
  });
});
