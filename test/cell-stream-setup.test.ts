/**
 * The streamed fast operator's set-up reads the cells in one pass (engine/fast-stream.ts cellPass): the
 * classes' through-slice index and magnetization (classInfo) and each column's one-tissue flag
 * (oneTissueColumns). The oracles are the stored isochromats (expandCells: Σ|m0| per RF class, as
 * engine/fast.ts isoClassInfo sums them) and a per-column check written out here. The plan the streamed
 * operator uses fills only its slice-axis phase tables (planFromClasses sliceTablesOnly): those must be the
 * full plan's numbers, and every other table NaN.
 */
import { describe, expect, test } from "vitest";
import { loadPhantom, loadProtocol } from "../src/cli/inputs.js";
import { parsePhantom } from "../src/phantom/index.js";
import { isoGeometry } from "../src/api.js";
import { expandCells, sampleCells, type IsochromatCells } from "../src/isochromats/index.js";
import { CellStream } from "../src/engine/index.js";
import { chunkStarts, planFromClasses } from "../src/engine/plan.js";
import { buildSequence } from "../src/sequence/index.js";

/** Two spheres whose surfaces cross the sampled slab (fractions that change along the slice axis). */
const SPHERE = parsePhantom({
  name: "sphere-and-bottle", description: "a sphere cut by the slab, for the one-tissue flag",
  tissues: {
    gel: { pd: 1, t1: "900 ms", t2: "80 ms", t2star: "40 ms", species: "water" },
    oil: { pd: 0.9, t1: "300 ms", t2: "60 ms", t2star: "30 ms", species: "fat" },
  },
  shapes: [
    { shape: "sphere", center: ["-30 mm", "0 mm", "4 mm"], radius: "26 mm", tissue: "gel" },
    { shape: "sphere", center: ["35 mm", "10 mm", "-3 mm"], radius: "30 mm", tissue: "oil" },
  ],
}, "sphere-and-bottle", 1.5);

function cellsOf(file: string, protocol: string, sets: string[], t2prime: number) {
  const p = loadProtocol(protocol, sets);
  const ph = file === "sphere" ? SPHERE : loadPhantom(file, p.field);
  const geo = isoGeometry(p, p.slice.position);
  const cells = sampleCells(ph, geo, p.field, { density: 2, sliceCount: 4, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: t2prime, offsetHz: 0 });
  return { p, cells };
}

/** The one-tissue flag written out: nw entries, one tissue and one fraction, through-slice indices 0 … nw−1 in order. */
function oneTissueDirect(cells: IsochromatCells): Uint8Array {
  const nw = cells.wGrid.length, out = new Uint8Array(cells.columns);
  for (let col = 0; col < cells.columns; col++) {
    const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
    if (e1 - e0 !== nw) continue;
    let one = true;
    for (let e = e0; e < e1; e++) {
      if (cells.entTissue[e] !== cells.entTissue[e0] || cells.entFrac[e] !== cells.entFrac[e0] || cells.entW[e] !== e - e0) one = false;
    }
    out[col] = one ? 1 : 0;
  }
  return out;
}

const CASES = [
  ["phantoms/torso-slice.json", "gre-t1-3t", 2],
  ["phantoms/two-bottle.json", "gre-demo-1.5t", 4],
  ["phantoms/disc.json", "gre-t1-3t", 1],
  ["sphere", "gre-demo-1.5t", 2],
] as const;

describe("the streamed operator's one pass over the cells", () => {
  test.each(CASES)("%s: one-tissue flags and per-class magnetization against the stored isochromats", (file, protocol, t2prime) => {
    const { cells } = cellsOf(file, protocol, ["matrix.read=48", "matrix.phase=40"], t2prime);
    const stream = new CellStream(cells);
    const flags = stream.oneTissueColumns();
    expect(Array.from(flags)).toEqual(Array.from(oneTissueDirect(cells)));
    expect(flags.includes(1)).toBe(true);
    // the torso has columns of several tissues and the sphere columns of changing fraction through the slab
    if (file.includes("torso") || file === "sphere") expect(flags.includes(0)).toBe(true);

    const { classIw, mass } = stream.classInfo();
    const spec = stream.spec;
    // stream class of each (through-slice index, Δf, R1, R2): the isochromats' RF class keys
    const key = (w: number, df: number, r1: number, r2: number) => `${w}|${df}|${r1}|${r2}`;
    const classOf = new Map<string, number>();
    const wIndex = new Map<number, number>();
    cells.wGrid.forEach((w, i) => wIndex.set(w, i));
    for (let k = 0; k < spec.classes; k++) classOf.set(key(wIndex.get(spec.classW[k]!)!, spec.classDf[k]!, spec.classR1[k]!, spec.classR2[k]!), k);
    const iso = expandCells(cells);
    const direct = new Float64Array(spec.classes), iwOf = new Int32Array(spec.classes).fill(-1);
    let missing = 0;
    for (let i = 0; i < iso.count; i++) {
      const k = classOf.get(key(iso.iw[i]!, iso.df[i]!, iso.r1[i]!, iso.r2[i]!));
      if (k === undefined) {
        missing++;
        continue;
      }
      direct[k] = direct[k]! + Math.abs(iso.m0[i]!);
      iwOf[k] = iso.iw[i]!;
    }
    expect(missing, "isochromats without a class of the stream").toBe(0);
    expect(Array.from(classIw)).toEqual(Array.from(iwOf));
    // the same terms summed in another order: equal to rounding
    let worst = 0;
    for (let k = 0; k < spec.classes; k++) worst = Math.max(worst, Math.abs(mass[k]! - direct[k]!) / direct[k]!);
    expect(worst).toBeLessThanOrEqual(1e-12);
  });

  test("the streamed plan's slice-axis tables are the full plan's; its read and phase tables are NaN", () => {
    const { p, cells } = cellsOf("phantoms/two-bottle.json", "gre-demo-1.5t", ["matrix.read=32", "matrix.phase=24"], 1);
    const seq = buildSequence(p);
    const stream = new CellStream(cells);
    const opts = { receiverFilter: p.receiverFilter };
    const full = planFromClasses(seq, cells, stream.spec, chunkStarts(cells), opts);
    const slice = planFromClasses(seq, cells, stream.spec, chunkStarts(cells), { ...opts, sliceTablesOnly: true });
    expect(slice.tab.length).toBe(full.tab.length);
    const sliceOffsets = new Set<number>(), otherOffsets = new Set<number>();
    for (const op of full.ops) {
      if (op.kind !== "free") continue;
      sliceOffsets.add(op.sliceTable);
      otherOffsets.add(op.readTable);
      otherOffsets.add(op.phaseTable);
    }
    expect(sliceOffsets.size).toBeGreaterThan(0);
    const nw = cells.wGrid.length;
    for (const o of sliceOffsets) for (let i = 0; i < 2 * nw; i++) expect(Object.is(slice.tab[o + i], full.tab[o + i])).toBe(true);
    let nan = 0;
    for (const o of otherOffsets) {
      if (sliceOffsets.has(o)) continue;
      expect(Number.isNaN(slice.tab[o])).toBe(true);
      expect(Number.isFinite(full.tab[o])).toBe(true);
      nan++;
    }
    expect(nan).toBeGreaterThan(0);
  });
});
