/**
 * sampleCells and truthMaps classify tiles of cells at once where a tile is
 * certainly filled by one tissue or empty (phantom/cells.ts cellUniform). The
 * oracle is cellContents on every cell alone (tiles switched off): the cells
 * and truth maps must be the same numbers, bit for bit, on random phantoms of
 * 2D and 3D shapes in all three orientations.
 */
import { afterEach, describe, expect, test } from "vitest";
import fc from "fast-check";
import { DEFAULT_SUB, parsePhantom, setCellTiles, type Phantom } from "../src/phantom/index.js";
import { sampleCells, type IsochromatCells } from "../src/isochromats/index.js";
import { truthMaps, type TruthMaps } from "../src/analysis/truth.js";
import { isoGeometry } from "../src/api.js";
import { loadPhantom, loadProtocol } from "../src/cli/inputs.js";
import { logicalAxes } from "../src/protocol/index.js";

afterEach(() => {
  setCellTiles(true);
});

const same = (a: ArrayLike<number>, b: ArrayLike<number>): boolean => a.length === b.length && Array.from(a).every((x, i) => Object.is(x, b[i]));

function cellsEqual(a: IsochromatCells, b: IsochromatCells): string | null {
  if (a.count !== b.count || a.columns !== b.columns) return `count ${a.count}/${b.count}, columns ${a.columns}/${b.columns}`;
  for (const k of ["colA", "colB", "colSub", "colStart", "entStart", "entW", "entTissue", "entFrac"] as const) {
    if (!same(a[k], b[k])) return k;
  }
  return null;
}

function truthEqual(a: TruthMaps, b: TruthMaps): string | null {
  for (const k of ["pd", "t1", "t2", "t2star", "df", "fatFraction", "label"] as const) if (!same(a[k], b[k])) return k;
  return null;
}

const shapeArb = fc.record({
  shape: fc.constantFrom("ellipse", "rectangle", "sphere", "cylinder", "box"),
  x: fc.integer({ min: -60, max: 60 }), y: fc.integer({ min: -60, max: 60 }), z: fc.integer({ min: -8, max: 8 }),
  a: fc.integer({ min: 2, max: 50 }), b: fc.integer({ min: 2, max: 50 }), c: fc.integer({ min: 2, max: 30 }),
  rotation: fc.integer({ min: 0, max: 89 }),
  tissue: fc.constantFrom("gel", "oil", "salt"),
});

/** A phantom of mm-sized shapes (positions and sizes in mm). */
function phantomOf(shapes: { shape: string; x: number; y: number; z: number; a: number; b: number; c: number; rotation: number; tissue: string }[]): Phantom {
  const mm = (v: number) => `${v} mm`;
  return parsePhantom({
    name: "tiles", description: "random shapes for the tile check",
    tissues: {
      gel: { pd: 1, t1: "900 ms", t2: "80 ms", t2star: "40 ms", species: "water" },
      oil: { pd: 0.9, t1: "300 ms", t2: "60 ms", t2star: "30 ms", species: "fat" },
      salt: { pd: 0.6, t1: "1500 ms", t2: "200 ms", t2star: "90 ms", species: "water" },
    },
    shapes: shapes.map((s) => {
      const rotation = `${s.rotation} deg`;
      switch (s.shape) {
        case "ellipse": return { shape: "ellipse", center: [mm(s.x), mm(s.y)], semiAxes: [mm(s.a), mm(s.b)], rotation, tissue: s.tissue };
        case "rectangle": return { shape: "rectangle", center: [mm(s.x), mm(s.y)], size: [mm(2 * s.a), mm(2 * s.b)], rotation, tissue: s.tissue };
        case "sphere": return { shape: "sphere", center: [mm(s.x), mm(s.y), mm(s.z)], radius: mm(s.a), tissue: s.tissue };
        case "box": return { shape: "box", center: [mm(s.x), mm(s.y), mm(s.z)], size: [mm(2 * s.a), mm(2 * s.b), mm(2 * s.c)], rotation, tissue: s.tissue };
        default: return { shape: "cylinder", center: [mm(s.x), mm(s.y), mm(s.z)], radius: mm(s.a), length: mm(2 * s.c), axis: "z", tissue: s.tissue };
      }
    }),
  }, "tiles", 1.5);
}

describe("tiles of cells (cellUniform) against every cell alone", () => {
  test("the claim behind it: N·(1/N) = 1 exactly for every sub-sample count N = n1·n2·n3, n ≤ DEFAULT_SUB", () => {
    for (let a = 1; a <= DEFAULT_SUB; a++) for (let b = 1; b <= DEFAULT_SUB; b++) for (let c = 1; c <= DEFAULT_SUB; c++) {
      const n = a * b * c;
      expect(n * (1 / n), `N = ${n}`).toBe(1);
    }
  });

  test("sampleCells and truthMaps give the same numbers with and without tiles (random phantoms, three orientations)", () => {
    fc.assert(
      fc.property(
        fc.array(shapeArb, { minLength: 1, maxLength: 6 }),
        fc.constantFrom("axial", "coronal", "sagittal"),
        fc.integer({ min: -6, max: 6 }),
        fc.constantFrom(1, 2, 3),
        (shapes, orientation, posMm, density) => {
          const ph = phantomOf(shapes);
          const p = loadProtocol("gre-demo-1.5t", ["matrix.read=40", "matrix.phase=36", "fov.read=16 cm", "fov.phase=14 cm", `slice.orientation=${orientation}`, `phaseDirection=${orientation === "coronal" ? "x" : "y"}`, `slice.position=${posMm} mm`]);
          const geo = isoGeometry(p, p.slice.position);
          const opt = { density, sliceCount: 3, sliceExtent: 2, fatModel: "multi" as const, t2primeIsochromats: 2, offsetHz: 0 };
          const grid = { axes: logicalAxes(p), nRead: 40, nPhase: 36, dx: p.fov.read / 40, dy: p.fov.phase / 36, thickness: p.slice.thickness, position: p.slice.position, offsetHz: 3 };
          const tiled = { cells: sampleCells(ph, geo, 1.5, opt), truth: truthMaps(ph, grid), fine: truthMaps(ph, { ...grid, nRead: 160, nPhase: 144, dx: grid.dx / 4, dy: grid.dy / 4 }, "pd-fat") };
          setCellTiles(false);
          const alone = { cells: sampleCells(ph, geo, 1.5, opt), truth: truthMaps(ph, grid), fine: truthMaps(ph, { ...grid, nRead: 160, nPhase: 144, dx: grid.dx / 4, dy: grid.dy / 4 }, "pd-fat") };
          setCellTiles(true);
          const c = cellsEqual(tiled.cells, alone.cells), t = truthEqual(tiled.truth, alone.truth);
          const f = same(tiled.fine.pd, alone.fine.pd) && same(tiled.fine.fatFraction, alone.fine.fatFraction) ? null : "fine";
          if (c || t || f) throw new Error(`differ: ${c ?? ""} ${t ?? ""} ${f ?? ""}`);
          return tiled.cells.count > 0 || alone.cells.count === 0;
        },
      ),
      { numRuns: 40, seed: 11 },
    );
  }, 60_000);

  test("the bundled phantoms: torso slice and two bottles at 64², the same cells and truth maps", () => {
    for (const [file, protocol] of [["phantoms/torso-slice.json", "gre-t1-3t"], ["phantoms/two-bottle.json", "gre-demo-1.5t"]] as const) {
      const p = loadProtocol(protocol, ["matrix.read=64", "matrix.phase=64"]);
      const ph = loadPhantom(file, p.field);
      const geo = isoGeometry(p, p.slice.position);
      const opt = { density: 2, sliceCount: 4, sliceExtent: 3, fatModel: "multi" as const, t2primeIsochromats: 2, offsetHz: 0 };
      const grid = { axes: logicalAxes(p), nRead: 64, nPhase: 64, dx: p.fov.read / 64, dy: p.fov.phase / 64, thickness: p.slice.thickness, position: p.slice.position, offsetHz: 0 };
      const a = { cells: sampleCells(ph, geo, p.field, opt), truth: truthMaps(ph, grid) };
      setCellTiles(false);
      const b = { cells: sampleCells(ph, geo, p.field, opt), truth: truthMaps(ph, grid) };
      setCellTiles(true);
      expect(cellsEqual(a.cells, b.cells), file).toBeNull();
      expect(truthEqual(a.truth, b.truth), file).toBeNull();
      expect(a.cells.count).toBeGreaterThan(0);
    }
  });
});

describe("slice-invariant replication (a column's first cell repeated at every w) only where every shape is 2D", () => {
  test("a 2D shape far from a sphere leaves the sphere's cells as they are without it (the sphere still changes along the slice)", () => {
    const tissues = {
      gel: { pd: 1, t1: "900 ms", t2: "80 ms", t2star: "40 ms", species: "water" },
      oil: { pd: 0.9, t1: "300 ms", t2: "60 ms", t2star: "30 ms", species: "fat" },
    };
    const sphere = { shape: "sphere", center: ["-30 mm", "0 mm", "4 mm"], radius: "26 mm", tissue: "gel" };
    const bottle = { shape: "ellipse", center: ["45 mm", "10 mm"], semiAxes: ["20 mm", "30 mm"], rotation: "20 deg", tissue: "oil" };
    const alone = parsePhantom({ name: "sphere", description: "a sphere cut by the slab", tissues, shapes: [sphere] }, "sphere", 1.5);
    const both = parsePhantom({ name: "sphere-bottle", description: "the sphere and a 2D bottle beside it", tissues, shapes: [sphere, bottle] }, "sphere-bottle", 1.5);
    const p = loadProtocol("gre-demo-1.5t", ["matrix.read=48", "matrix.phase=40"]);
    const geo = isoGeometry(p, p.slice.position);
    const opt = { density: 2, sliceCount: 4, sliceExtent: 3, fatModel: "multi" as const, t2primeIsochromats: 1, offsetHz: 0 };
    const a = sampleCells(alone, geo, 1.5, opt), b = sampleCells(both, geo, 1.5, opt);
    // the sphere's columns (gel) in both, keyed by grid position
    const columnsOf = (c: IsochromatCells) => {
      const m = new Map<string, string>();
      for (let col = 0; col < c.columns; col++) {
        const e0 = c.entStart[col]!, e1 = c.entStart[col + 1]!;
        if (c.entTissue[e0] !== 0) continue;
        const ent: string[] = [];
        for (let e = e0; e < e1; e++) ent.push(`${c.entW[e]}:${c.entTissue[e]}:${c.entFrac[e]}`);
        m.set(`${c.colA[col]},${c.colB[col]},${c.colSub[col]}`, ent.join(" "));
      }
      return m;
    };
    const ca = columnsOf(a), cb = columnsOf(b);
    expect(cb.size).toBe(ca.size);
    for (const [k, v] of ca) expect(cb.get(k), k).toBe(v);
    // the sphere's surface crosses the slab: some columns change along w (fewer cells, or other fractions)
    let varying = 0;
    for (const v of ca.values()) if (new Set(v.split(" ").map((x) => x.split(":").slice(1).join(":"))).size > 1 || v.split(" ").length < 4) varying++;
    expect(varying).toBeGreaterThan(0);
  });
});
