/**
 * The memory check of a run whose fast operator streams its weights from the
 * sampled cells (src/cli/memory.ts, api.ts beforeIsochromats): it estimates
 * the cells and the operator's grids, not stored isochromats, so a run that
 * fits streamed is not refused; where the isochromats are stored after all
 * (the direct operator) the check runs again before they are made.
 * Byte counts are our own accounting of our arrays; the checks compare the
 * estimates with the arrays the run actually made.
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";
import { isoGeometry } from "../src/api.js";
import { prepare } from "../src/cli/pipeline.js";
import { BYTES_PER_ISOCHROMAT, estimateMemory } from "../src/cli/memory.js";
import { UserError } from "../src/errors.js";

const tmp = mkdtempSync(join(tmpdir(), "isofold-memstream-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));

const base = {
  phantom: "phantoms/two-bottle.json", protocol: "gre-demo-1.5t", sets: ["matrix.read=32", "matrix.phase=32"], out: tmp, seed: 1,
  iso: { density: 4, sliceCount: 12, sliceExtent: 3, fatModel: "multi" as const, t2primeIsochromats: 16, offsetHz: 0 }, workers: 1,
};

/** A fast run from a prepared run's sampled cells (serial executor), and whether it asked for the stored isochromats. */
async function fastFromCells(p: ReturnType<typeof prepare>) {
  const { serialExecutor, simulateCells } = await import("../src/engine/index.js");
  let made = false;
  const r = await simulateCells(serialExecutor(), p.seq, p.cells, () => {
    made = true;
    return p.iso;
  }, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
  return { r, made };
}

/** Every alternative a refusal suggests ("try A or B", each of one or more flags), run with the same limit, passes the check. */
function expectSuggestionsFit(message: string, run: (iso: Record<string, number>) => unknown): void {
  expect(message).toMatch(/--max-memory: .* try /);
  const flags = { "--density": "density", "--t2prime-isochromats": "t2primeIsochromats", "--slice-isochromats": "sliceCount" } as const;
  const alternatives = message.slice(message.indexOf(" try ") + 5).split(" or ");
  expect(alternatives.length).toBeGreaterThan(0);
  for (const alt of alternatives) {
    const iso: Record<string, number> = {};
    for (const m of alt.matchAll(/(--[a-z0-9-]+) (\d+)/g)) if (m[1]! in flags) iso[flags[m[1] as keyof typeof flags]] = Number(m[2]);
    expect(Object.keys(iso).length, alt).toBeGreaterThan(0);
    expect(() => run(iso), alt).not.toThrow();
  }
}

describe("memory estimate of the streamed fast operator", () => {
  test("streamed estimate: far below the stored one, and above the cell arrays the run actually made", () => {
    // no T2′ spread here: the stored estimate's count then follows the isochromats made (checked first)
    // (the torso fills its field of view: the stored isochromats grow with it, the streamed grids with the matrix)
    const o = { ...base, phantom: "phantoms/torso-slice.json", protocol: "gre-t1-3t", sets: ["matrix.read=64", "matrix.phase=64"], iso: { ...base.iso, t2primeIsochromats: 1 }, maxMemory: 2 ** 50 };
    const p = prepare(o);
    const geo = isoGeometry(p.protocol, p.slices[0]!.position);
    const opts = { ...o.iso, sliceCount: p.cells.wGrid.length };
    const stored = estimateMemory(p.phantom, geo, p.protocol.field, opts, p.seq, 1, 1, false);
    const streamed = estimateMemory(p.phantom, geo, p.protocol.field, opts, p.seq, 1, 1, true);
    expect(streamed.streamed).toBe(true);
    expect(stored.isochromats / p.cells.count).toBeGreaterThan(0.5);
    expect(stored.isochromats / p.cells.count).toBeLessThan(2);
    // the cell arrays made: 4 + 4 + 8 B per entry, 5 × 4 B per column
    const cellBytes = p.cells.entW.length * 16 + p.cells.columns * 20;
    expect(streamed.isochromatBytes).toBeGreaterThan(cellBytes);
    expect(streamed.isochromatBytes).toBeLessThan(stored.isochromatBytes / 4);
  }, 60_000);

  test("the stored estimate follows the isochromats made with a T2′ spread, shared among a voxel's columns or not", () => {
    // density 4 (16 columns per voxel), 16 T2′ values: 8 pairs cannot be shared among 16 columns, every column carries 16;
    // density 2 (4 columns), 16 values: 8 pairs shared, 4 per column (isochromats/spread.ts spreadAssignment)
    for (const density of [4, 2]) {
      const o = { ...base, iso: { ...base.iso, density }, maxMemory: 2 ** 50 };
      const p = prepare(o);
      const geo = isoGeometry(p.protocol, p.slices[0]!.position);
      const e = estimateMemory(p.phantom, geo, p.protocol.field, { ...o.iso, sliceCount: p.cells.wGrid.length }, p.seq, 1, 1, false);
      expect(e.isochromats / p.cells.count, `density ${density}`).toBeGreaterThan(0.5);
      expect(e.isochromats / p.cells.count, `density ${density}`).toBeLessThan(2);
    }
  }, 60_000);

  test("a limit between the two estimates: the fast run streams (no refusal, no isochromat made); the direct one is refused before its isochromats", async () => {
    const probe = prepare({ ...base, maxMemory: 2 ** 50 });
    const geo = isoGeometry(probe.protocol, probe.slices[0]!.position);
    const opts = { ...base.iso, sliceCount: probe.cells.wGrid.length };
    const stored = estimateMemory(probe.phantom, geo, probe.protocol.field, opts, probe.seq, 1, 1, false).bytes;
    const streamed = estimateMemory(probe.phantom, geo, probe.protocol.field, opts, probe.seq, 1, 1, true).bytes;
    const limit = Math.sqrt(stored * streamed);
    // fast: the check before sampling passes on the streamed estimate
    const fast = prepare({ ...base, readout: "fast", maxMemory: limit });
    const { r, made } = await fastFromCells(fast);
    expect(r.readout.operator).toBe("fast");
    expect(made).toBe(false);
    // asking for the isochromats after all runs the stored check: refused with one line naming the limit
    expect(() => fast.iso).toThrow(UserError);
    expect(() => fast.iso).toThrow(/--max-memory: .*isochromats/);
    // direct: refused up front
    expect(() => prepare({ ...base, readout: "direct", maxMemory: limit })).toThrow(/--max-memory: .*isochromats × 160 B/);
  }, 60_000);

  test("a refusal suggests only options that fit: each suggestion, run with the same limit, passes the check (a spin echo, whose through-slice count is raised for its crushers)", () => {
    const o = { ...base, protocol: "se-t2-1.5t", sets: ["matrix.read=64", "matrix.phase=64"], iso: { ...base.iso, density: 2 }, readout: "direct" as const };
    const probe = prepare({ ...o, maxMemory: 2 ** 50 });
    // the run raised the through-slice count above the 12 asked (its coherence pathways): fewer asked are raised again
    expect(probe.cells.wGrid.length).toBeGreaterThan(12);
    const geo = isoGeometry(probe.protocol, probe.slices[0]!.position);
    const est = estimateMemory(probe.phantom, geo, probe.protocol.field, { ...o.iso, sliceCount: probe.cells.wGrid.length }, probe.seq, 1, 1, false);
    const full = est.bytes;
    const maxMemory = 0.45 * full;
    let message = "";
    try {
      prepare({ ...o, maxMemory });
    } catch (e) {
      message = (e as Error).message;
    }
    expectSuggestionsFit(message, (iso) => prepare({ ...o, iso: { ...o.iso, ...iso }, maxMemory }));
    // a limit no one option reaches (the spread is shared among a voxel's density² columns, so a lower density alone
    // keeps the count, and the smallest spread alone leaves a quarter of it): a lower density and spread together
    const pairLimit = est.kspaceBytes + est.workerBytes + 0.15 * est.isochromatBytes;
    let pairMessage = "";
    try {
      prepare({ ...o, maxMemory: pairLimit });
    } catch (e) {
      pairMessage = (e as Error).message;
    }
    expect(pairMessage).toMatch(/\(together\)/);
    expectSuggestionsFit(pairMessage, (iso) => prepare({ ...o, iso: { ...o.iso, ...iso }, maxMemory: pairLimit }));
  }, 60_000);

  test("a B0 model streams: the estimate covers the class ids and classes the stream made, fewer bytes than the stored path's arrays, and the run streams within its estimate", async () => {
    const dir = mkdtempSync(join(tmp, "b0-"));
    const j = JSON.parse(readFileSync("phantoms/two-bottle.json", "utf8")) as Record<string, unknown>;
    j["b0"] = { expression: "60 * x / 0.05 + 15" };
    writeFileSync(join(dir, "p.json"), JSON.stringify(j));
    const o = { ...base, phantom: join(dir, "p.json"), iso: { ...base.iso, density: 2, t2primeIsochromats: 4 } };
    const probe = prepare({ ...o, maxMemory: 2 ** 50 });
    const geo = isoGeometry(probe.protocol, probe.slices[0]!.position);
    const opts = { ...o.iso, sliceCount: probe.cells.wGrid.length };
    const stored = estimateMemory(probe.phantom, geo, probe.protocol.field, opts, probe.seq, 1, 1, false);
    const streamed = estimateMemory(probe.phantom, geo, probe.protocol.field, opts, probe.seq, 1, 1, true);
    const { CellStream } = await import("../src/engine/fast-stream.js");
    const s = new CellStream(probe.cells);
    // arrays made: cells (16 B per entry, 20 B per column), a class id per isochromat, per class w, Δf, r1, r2 and 12 RF-map numbers
    const made = probe.cells.entW.length * 16 + probe.cells.columns * 20 + probe.cells.count * 4 + s.spec.classes * (32 + 96);
    expect(s.spec.classes).toBeGreaterThan(probe.cells.columns);
    expect(streamed.isochromatBytes).toBeGreaterThan(made);
    // the arrays the stored path would make: the isochromats, their class ids and the same classes (plan.ts rfClasses)
    const storedMade = probe.cells.count * (BYTES_PER_ISOCHROMAT + 4) + s.spec.classes * (32 + 96);
    expect(made).toBeLessThan(storedMade);
    // a limit the streamed estimate just fits (at this small size the grids outweigh the stored isochromats): the run streams
    const limit = streamed.bytes * 1.01;
    const fast = prepare({ ...o, readout: "fast", maxMemory: limit });
    const { r, made: expanded } = await fastFromCells(fast);
    expect(r.readout.operator).toBe("fast");
    expect(r.readout.weights).toMatch(/streamed/);
    expect(expanded).toBe(false);
  }, 60_000);
});
