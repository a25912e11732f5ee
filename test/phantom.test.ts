import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { UserError } from "../src/errors.js";
import {
  cellContents,
  compileB0Expression,
  libraryNames,
  libraryTissue,
  makeShape,
  parsePhantom,
  phantomBounds,
  type Phantom,
} from "../src/phantom/index.js";
import { loadPhantom } from "../src/cli/inputs.js";

const PHANTOMS = join(import.meta.dirname, "..", "phantoms");
const BUNDLED = ["two-bottle", "torso-slice", "edge-grid", "disc"];
const MM = 1e-3;

/** A minimal valid phantom file, to be broken by one edit per test. */
function base(): Record<string, any> {
  return {
    name: "t",
    description: "test",
    tissues: { gel: { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "45 ms", species: "water" } },
    shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "2 cm", tissue: "gel" }],
  };
}

/** Runs fn, expects a UserError, returns it. */
function userErrorOf(fn: () => unknown): UserError {
  try {
    fn();
  } catch (e) {
    expect(e).toBeInstanceOf(UserError);
    return e as UserError;
  }
  throw new Error("expected a UserError, nothing was thrown");
}

function out(n = 8) {
  return { tissue: new Int32Array(n), fraction: new Float64Array(n) };
}

/** Exact area of the unit-free square [x0,x0+d]×[y0,y0+d] on the side n·p ≥ c (clip + shoelace). */
function squareAreaInHalfPlane(x0: number, y0: number, d: number, nx: number, ny: number, c: number): number {
  const poly: [number, number][] = [[x0, y0], [x0 + d, y0], [x0 + d, y0 + d], [x0, y0 + d]];
  const clipped: [number, number][] = [];
  for (let i = 0; i < poly.length; i++) {
    const p = poly[i]!, q = poly[(i + 1) % poly.length]!;
    const fp = nx * p[0] + ny * p[1] - c, fq = nx * q[0] + ny * q[1] - c;
    if (fp >= 0) clipped.push(p);
    if ((fp >= 0) !== (fq >= 0)) {
      const t = fp / (fp - fq);
      clipped.push([p[0] + t * (q[0] - p[0]), p[1] + t * (q[1] - p[1])]);
    }
  }
  let a = 0;
  for (let i = 0; i < clipped.length; i++) {
    const p = clipped[i]!, q = clipped[(i + 1) % clipped.length]!;
    a += p[0] * q[1] - q[0] * p[1];
  }
  return Math.abs(a) / 2;
}

describe("bundled phantoms", () => {
  for (const name of BUNDLED) {
    for (const field of [1.5, 3]) {
      test(`loadPhantom(${name}.json, ${field} T) validates, resolves every tissue and gives no warnings`, () => {
        const ph = loadPhantom(join(PHANTOMS, `${name}.json`), field);
        expect(ph.name).toBe(name);
        expect(ph.description.length).toBeGreaterThan(20);
        expect(ph.shapes.length).toBeGreaterThan(0);
        expect(ph.warnings).toEqual([]);
        for (const s of ph.shapes) expect(ph.tissues[s.tissue]).toBeDefined();
        for (const t of ph.tissues) {
          expect(t.t2star).toBeLessThanOrEqual(t.t2);
          expect(t.pd).toBeGreaterThanOrEqual(0);
        }
      });
    }
  }

  test("loadPhantom(torso-slice) is 36 cm wide and 24 cm front to back, infinite along z", () => {
    const b = phantomBounds(loadPhantom(join(PHANTOMS, "torso-slice.json"), 3));
    expect(b.max[0] - b.min[0]).toBeCloseTo(0.36, 6);
    expect(b.max[1] - b.min[1]).toBeCloseTo(0.24, 6);
    expect(b.min[2]).toBe(-Infinity);
    expect(b.max[2]).toBe(Infinity);
  });

  test("loadPhantom(two-bottle) uses library values of the requested field (liver-like T1 rise: oil and gel T1 longer at 3 T)", () => {
    const a = loadPhantom(join(PHANTOMS, "two-bottle.json"), 1.5);
    const b = loadPhantom(join(PHANTOMS, "two-bottle.json"), 3);
    const oil15 = a.tissues.find((t) => t.name === "oil")!, oil3 = b.tissues.find((t) => t.name === "oil")!;
    expect(oil15.fatFraction).toBe(1);
    expect(oil3.t1).toBeGreaterThan(oil15.t1);
    const bb = phantomBounds(b);
    expect(bb.min).toEqual([expect.closeTo(-0.0425, 9), expect.closeTo(-0.0175, 9), expect.closeTo(-0.05, 9)]);
    expect(bb.max).toEqual([expect.closeTo(0.0425, 9), expect.closeTo(0.0175, 9), expect.closeTo(0.05, 9)]);
  });
});

describe("libraryTissue", () => {
  test("libraryTissue returns the nearer table without a warning at 1.5 T, 3 T and a field a few percent off nominal (2.93 T)", () => {
    const l15 = libraryTissue("liver", 1.5)!, lOff = libraryTissue("liver", 2.93)!, l3 = libraryTissue("liver", 3)!;
    expect(l15.tableFieldT).toBe(1.5);
    expect(l3.tableFieldT).toBe(3);
    expect(lOff.tissue).toEqual(l3.tissue);
    expect([l15.warning, lOff.warning, l3.warning]).toEqual([null, null, null]);
    // de Bazelaire et al. 2004, Radiology 230:652, Table: liver T1 at 3 T 809 ms (checked against the paper, status V in the library)
    expect(l3.tissue.t1).toBeCloseTo(0.809, 9);
  });

  test("libraryTissue at 2 T and 7 T uses the nearer table and returns a warning", () => {
    const a = libraryTissue("muscle", 2)!, b = libraryTissue("muscle", 7)!;
    expect(a.tableFieldT).toBe(1.5);
    expect(b.tableFieldT).toBe(3);
    expect(a.warning).toMatch(/1\.5 T used at 2 T/);
    expect(b.warning).toMatch(/3 T used at 7 T/);
  });

  test("libraryTissue returns null for an unknown name", () => {
    expect(libraryTissue("unobtainium", 3)).toBeNull();
  });

  test("every library tissue is complete and physical at both fields (T2* ≤ T2 < T1, pd and fatFraction in 0..1)", () => {
    const names = libraryNames();
    for (const n of ["water-gel", "oil", "fat", "muscle", "liver", "spleen", "kidney", "white-matter", "grey-matter", "csf", "blood", "bone-marrow", "cartilage"]) {
      expect(names).toContain(n);
    }
    for (const n of names) {
      for (const f of [1.5, 3]) {
        const t = libraryTissue(n, f)!.tissue;
        expect(t.t2star).toBeGreaterThan(0);
        expect(t.t2star).toBeLessThanOrEqual(t.t2);
        expect(t.t2).toBeLessThan(t.t1);
        expect(t.pd).toBeGreaterThan(0);
        expect(t.pd).toBeLessThanOrEqual(1);
        expect(t.fatFraction).toBeGreaterThanOrEqual(0);
        expect(t.fatFraction).toBeLessThanOrEqual(1);
      }
    }
    expect(libraryTissue("bone-marrow", 3)!.tissue.fatFraction).toBeGreaterThan(0);
    expect(libraryTissue("bone-marrow", 3)!.tissue.fatFraction).toBeLessThan(1);
  });
});

describe("parsePhantom bad input", () => {
  test("parsePhantom accepts the minimal phantom (the base of the tests below)", () => {
    const ph = parsePhantom(base(), "p.json", 3);
    expect(ph.tissues.map((t) => t.name)).toEqual(["gel"]);
    expect(ph.shapes[0]!.type).toBe("sphere");
  });

  test("parsePhantom rejects an unknown key with its path, the allowed keys and a suggestion", () => {
    const j = base();
    j.shapes[0].radus = j.shapes[0].radius;
    delete j.shapes[0].radius;
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.file).toBe("p.json");
    expect(e.keyPath).toBe("shapes[0].radus");
    expect(e.message).toMatch(/unknown key "radus".*did you mean "radius".*shape, tissue, center, rotation, label, radius/);
  });

  test("parsePhantom rejects an unknown top-level key", () => {
    const j = base();
    j.field = "3 T";
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("field");
    expect(e.message).toMatch(/name, description, tissues, shapes, b0/);
  });

  test("parsePhantom rejects a missing tissue and lists inline and library names", () => {
    const j = base();
    j.shapes.push({ shape: "sphere", center: ["1 cm", "0 cm", "0 cm"], radius: "1 cm", tissue: "musle" });
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[1].tissue");
    expect(e.message).toMatch(/unknown tissue "musle".*did you mean "muscle".*defined in this file: gel.*library: .*muscle/);
  });

  test("parsePhantom rejects a length without units (\"5\")", () => {
    const j = base();
    j.shapes[0].radius = "5";
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[0].radius");
    expect(e.message).toMatch(/"5" has no units; write a length .* like "24 cm"/);
  });

  test("parsePhantom rejects a number instead of a string with units (5)", () => {
    const j = base();
    j.shapes[0].center[1] = 5;
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[0].center[1]");
    expect(e.message).toMatch(/5 has no units/);
  });

  test("parsePhantom rejects wrong units (\"5 kg\" for a radius, \"800 cm\" for t1)", () => {
    const j = base();
    j.shapes[0].radius = "5 kg";
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[0].radius");
    expect(e.message).toMatch(/not a length/);
    const k = base();
    k.tissues.gel.t1 = "800 cm";
    const f = userErrorOf(() => parsePhantom(k, "p.json", 3));
    expect(f.keyPath).toBe("tissues.gel.t1");
    expect(f.message).toMatch(/not a time/);
  });

  test("parsePhantom rejects a negative radius and a zero size", () => {
    const j = base();
    j.shapes[0].radius = "-1 cm";
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[0].radius");
    expect(e.message).toMatch(/greater than zero/);
    const k = base();
    k.shapes[0] = { shape: "box", center: ["0 cm", "0 cm", "0 cm"], size: ["1 cm", "0 cm", "1 cm"], tissue: "gel" };
    expect(userErrorOf(() => parsePhantom(k, "p.json", 3)).keyPath).toBe("shapes[0].size[1]");
  });

  test("parsePhantom rejects a 3D shape with a 2-element center and an unknown shape type", () => {
    const j = base();
    j.shapes[0].center = ["0 cm", "0 cm"];
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("shapes[0].center");
    const k = base();
    k.shapes[0].shape = "cone";
    const f = userErrorOf(() => parsePhantom(k, "p.json", 3));
    expect(f.keyPath).toBe("shapes[0].shape");
    expect(f.message).toMatch(/ellipse.*rectangle.*ellipsoid.*sphere.*box.*cylinder/);
  });

  test("parsePhantom rejects tissue values out of range (pd > 1, T2* > T2, no species)", () => {
    const a = base();
    a.tissues.gel.pd = 1.2;
    expect(userErrorOf(() => parsePhantom(a, "p.json", 3)).keyPath).toBe("tissues.gel.pd");
    const b = base();
    b.tissues.gel.t2star = "100 ms";
    expect(userErrorOf(() => parsePhantom(b, "p.json", 3)).keyPath).toBe("tissues.gel.t2star");
    const c = base();
    delete c.tissues.gel.species;
    expect(userErrorOf(() => parsePhantom(c, "p.json", 3)).keyPath).toBe("tissues.gel.species");
    const d = base();
    d.tissues.gel.species = "fatty";
    expect(userErrorOf(() => parsePhantom(d, "p.json", 3)).message).toMatch(/"water", "fat"/);
  });

  test("parsePhantom reads fatFraction (species then ignored, with a warning) and fatModel", () => {
    const j = base();
    j.tissues.gel.fatFraction = 0.3;
    j.tissues.gel.fatModel = "single";
    const ph = parsePhantom(j, "p.json", 3);
    expect(ph.tissues[0]!.fatFraction).toBe(0.3);
    expect(ph.tissues[0]!.fatModel).toBe("single");
    expect(ph.warnings.join()).toMatch(/species is ignored/);
  });

  test("parsePhantom rejects empty b0 susceptibility and fieldMap objects, naming the missing key", () => {
    for (const [k, sub] of [["susceptibility", "objects"], ["fieldMap", "file"]] as const) {
      const j = base();
      j.b0 = { [k]: {} };
      const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
      expect(e.keyPath).toBe(`b0.${k}.${sub}`);
    }
  });

  test("loadPhantom reports malformed JSON with file, line and column", () => {
    const dir = mkdtempSync(join(tmpdir(), "isofold-phantom-"));
    const file = join(dir, "bad.json");
    writeFileSync(file, '{\n  "name": "x",\n  "shapes": [],\n}\n');
    const e = userErrorOf(() => loadPhantom(file, 3));
    expect(e.file).toBe(file);
    expect(e.message).toMatch(/not valid JSON at line 4, column 1/);
  });

  test("loadPhantom reports a missing file as a UserError", () => {
    const e = userErrorOf(() => loadPhantom(join(tmpdir(), "no-such-isofold-phantom.json"), 3));
    expect(e.message).toMatch(/no such file/);
  });
});

describe("shapes", () => {
  test("rotation \"90 deg\": a 4×1 cm rectangle contains (0, 1.5 cm) only after rotation", () => {
    const j = base();
    j.shapes = [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["4 cm", "1 cm"], tissue: "gel" }];
    const flat = parsePhantom(j, "p.json", 3).shapes[0]!;
    j.shapes[0].rotation = "90 deg";
    const turned = parsePhantom(j, "p.json", 3).shapes[0]!;
    expect(flat.contains(0, 0.015, 0)).toBe(false);
    expect(turned.contains(0, 0.015, 0)).toBe(true);
    expect(flat.contains(0.015, 0, 0)).toBe(true);
    expect(turned.contains(0.015, 0, 0)).toBe(false);
  });

  test("rotation \"30 deg\" turns x towards y about the shape centre", () => {
    const s = makeShape({ type: "rectangle", tissue: 0, center: [0.01, 0.02, 0], size: [0.04, 0.002], rotation: Math.PI / 6 });
    const r = 0.015;
    expect(s.contains(0.01 + r * Math.cos(Math.PI / 6), 0.02 + r * Math.sin(Math.PI / 6), 0)).toBe(true);
    expect(s.contains(0.01 + r * Math.cos(Math.PI / 6), 0.02 - r * Math.sin(Math.PI / 6), 0)).toBe(false);
  });

  test("distanceBound never exceeds the true distance to an ellipse, ellipsoid, cylinder and box boundary (dense boundary oracle)", () => {
    const shapes = [
      makeShape({ type: "ellipse", tissue: 0, center: [0.01, -0.02, 0], semiAxes: [0.05, 0.02], rotation: 0.4 }),
      makeShape({ type: "ellipsoid", tissue: 0, center: [0, 0, 0], semiAxes: [0.05, 0.03, 0.02], rotation: -0.3 }),
      makeShape({ type: "cylinder", tissue: 0, center: [0, 0, 0.01], radius: 0.02, length: 0.06, axis: "x", rotation: 0.7 }),
      makeShape({ type: "box", tissue: 0, center: [0, 0, 0], size: [0.04, 0.02, 0.03], rotation: 1.1 }),
    ];
    // Boundary points from a fine grid: inside points with an outside neighbour.
    const h = 0.001;
    let rnd = 12345;
    const rand = () => ((rnd = (rnd * 1103515245 + 12345) % 2147483648) / 2147483648) * 0.14 - 0.07;
    for (const s of shapes) {
      const edge: number[] = [];
      const nz = s.is2D ? 1 : 141;
      for (let i = 0; i < 141; i++) for (let j = 0; j < 141; j++) for (let k = 0; k < nz; k++) {
        const x = -0.07 + i * h, y = -0.07 + j * h, z = s.is2D ? 0 : -0.07 + k * h;
        if (s.contains(x, y, z) && (!s.contains(x + h, y, z) || !s.contains(x - h, y, z) || !s.contains(x, y + h, z) || !s.contains(x, y - h, z) || (!s.is2D && (!s.contains(x, y, z + h) || !s.contains(x, y, z - h))))) edge.push(x, y, z);
      }
      expect(edge.length).toBeGreaterThan(300);
      for (let q = 0; q < 200; q++) {
        const x = rand(), y = rand(), z = s.is2D ? 0 : rand();
        let dmin = Infinity;
        for (let p = 0; p < edge.length; p += 3) dmin = Math.min(dmin, Math.hypot(edge[p]! - x, edge[p + 1]! - y, edge[p + 2]! - z));
        const d = s.distanceBound(x, y, z);
        expect(Math.sign(d) >= 0).toBe(!s.contains(x, y, z) || d === 0);
        // grid boundary is within one grid diagonal of the true boundary
        expect(Math.abs(d)).toBeLessThanOrEqual(dmin + h * Math.sqrt(3));
      }
    }
  });
});

describe("cellContents", () => {
  // A rectangle whose left edge lies at x = 0: x ∈ [0, 0.1] m.
  const edgePhantom = (rotation = 0): Phantom =>
    parsePhantom(
      { name: "edge", tissues: base().tissues, shapes: [{ shape: "rectangle", center: ["5 cm", "0 cm"], size: ["10 cm", "10 cm"], rotation: `${rotation} deg`, tissue: "gel" }] },
      "edge.json",
      3,
    );

  test("cellContents of a cell straddling a straight edge at fraction f gives f within 1/sub² (sub = 2, 4, 8)", () => {
    const ph = edgePhantom();
    const d = 1 * MM;
    const o = out();
    for (const sub of [2, 4, 8]) {
      for (let f = 0.03; f < 1; f += 0.07) {
        const cx = (f - 0.5) * d; // the cell [cx − d/2, cx + d/2] has a fraction f at x ≥ 0
        const n = cellContents(ph, cx, 0.01, 0, [d, 0, 0], [0, d, 0], [0, 0, 5 * MM], o, sub);
        expect(n).toBeLessThanOrEqual(1);
        const got = n === 0 ? 0 : o.fraction[0]!;
        if (n === 1) expect(o.tissue[0]).toBe(0);
        expect(Math.abs(got - f)).toBeLessThanOrEqual(1 / (sub * sub));
      }
    }
  });

  test("cellContents at oblique edges (3°…80°) is unbiased and converges: mean error < 0.002, RMS ≤ 0.2/sub and falling from sub 4 to 8, max ≤ 0.6/sub against the exact clipped area", () => {
    const d = 1 * MM;
    const o = out();
    for (const deg of [3, 17, 31, 45, 62, 80]) {
      const theta = (deg * Math.PI) / 180;
      const ph = edgePhantom(deg);
      // The rectangle's left edge: n·p ≥ cLine with n = (cos θ, sin θ) (centre (5 cm, 0), half width 5 cm).
      const nx = Math.cos(theta), ny = Math.sin(theta);
      const cLine = nx * 0.05 - 0.05;
      const reach = 0.5 * (nx + ny) * d; // the edge crosses the cell while |offset| < reach
      let lastRms = Infinity;
      for (const sub of [4, 8]) {
        let sum = 0, sq = 0, max = 0;
        const m = 400;
        for (let q = 0; q < m; q++) {
          const s = -reach + ((q + 0.5) / m) * 2 * reach;
          // cell centre at signed distance s from the edge, beside the edge point 1 cm from the edge's middle
          const ex = 0.05 - 0.05 * nx - 0.01 * ny, ey = -0.05 * ny + 0.01 * nx;
          const px = ex + s * nx, py = ey + s * ny;
          const exact = squareAreaInHalfPlane(px - d / 2, py - d / 2, d, nx, ny, cLine) / (d * d);
          const n = cellContents(ph, px, py, 0, [d, 0, 0], [0, d, 0], [0, 0, 5 * MM], o, sub);
          const err = (n === 0 ? 0 : o.fraction[0]!) - exact;
          sum += err;
          sq += err * err;
          max = Math.max(max, Math.abs(err));
        }
        expect(Math.abs(sum / m)).toBeLessThan(0.002);
        const rms = Math.sqrt(sq / m);
        expect(rms).toBeLessThanOrEqual(0.2 / sub);
        expect(rms).toBeLessThan(lastRms);
        lastRms = rms;
        expect(max).toBeLessThanOrEqual(0.6 / sub);
      }
    }
  });

  test("cellContents: summed fractions × cell area of disc.json equal πr² within 0.5 %", () => {
    const ph = loadPhantom(join(PHANTOMS, "disc.json"), 3);
    const r = 0.05, d = 1 * MM, o = out();
    let area = 0;
    for (let i = 0; i < 120; i++) {
      for (let j = 0; j < 120; j++) {
        const n = cellContents(ph, -0.06 + (i + 0.5) * d, -0.06 + (j + 0.5) * d, 0, [d, 0, 0], [0, d, 0], [0, 0, 3 * MM], o);
        for (let q = 0; q < n; q++) area += o.fraction[q]! * d * d;
      }
    }
    expect(Math.abs(area / (Math.PI * r * r) - 1)).toBeLessThan(0.005);
  });

  test("cellContents: summed fractions × cell volume of a sphere equal 4πr³/3 within 0.5 %, on a sheared grid", () => {
    const ph = parsePhantom(base(), "p.json", 3); // sphere r = 2 cm
    const r = 0.02, d = 1.25 * MM, o = out();
    // sheared cells: e2 leans along x, e3 along y (volume d³ still)
    const e1 = [d, 0, 0], e2 = [0.3 * d, d, 0], e3 = [0, 0.2 * d, d];
    let vol = 0;
    const n = 40;
    for (let i = -n; i < n; i++) for (let j = -n; j < n; j++) for (let k = -n; k < n; k++) {
      const a = i + 0.5, b = j + 0.5, c = k + 0.5;
      const x = a * e1[0]! + b * e2[0]! + c * e3[0]!, y = a * e1[1]! + b * e2[1]! + c * e3[1]!, z = c * e3[2]!;
      const m = cellContents(ph, x, y, z, e1, e2, e3, o);
      for (let q = 0; q < m; q++) vol += o.fraction[q]! * d * d * d;
    }
    expect(Math.abs(vol / ((4 / 3) * Math.PI * r ** 3) - 1)).toBeLessThan(0.005);
  });

  test("cellContents on two-bottle.json: thick-slice cells give πr²·thickness per bottle within 0.5 %, and a cell across a cap gives its z fraction", () => {
    const ph = loadPhantom(join(PHANTOMS, "two-bottle.json"), 3);
    const r = 0.0175, d = 0.5 * MM, t = 5 * MM, o = out();
    const vol = [0, 0];
    for (let i = 0; i < 200; i++) for (let j = 0; j < 80; j++) {
      const n = cellContents(ph, -0.05 + (i + 0.5) * d, -0.02 + (j + 0.5) * d, 0.01, [d, 0, 0], [0, d, 0], [0, 0, t], o);
      for (let q = 0; q < n; q++) vol[o.tissue[q]!]! += o.fraction[q]! * d * d * t;
    }
    for (const v of vol) expect(Math.abs(v / (Math.PI * r * r * t) - 1)).toBeLessThan(0.005);
    // the gel bottle's top cap is at z = 5 cm; a cell centred 1 mm below it with 5 mm thickness is 0.7 inside
    expect(cellContents(ph, -0.025, 0, 0.049, [d, 0, 0], [0, d, 0], [0, 0, t], o)).toBe(1);
    expect(Math.abs(o.fraction[0]! - 0.7)).toBeLessThanOrEqual(1 / 16);
  });

  test("cellContents gives one tissue with fraction 1 deep inside, nothing outside, and honours painting order", () => {
    const ph = parsePhantom(
      {
        name: "two",
        tissues: {
          a: { pd: 1, t1: "1 s", t2: "0.1 s", t2star: "0.05 s", species: "water" },
          b: { pd: 0.5, t1: "1 s", t2: "0.1 s", t2star: "0.05 s", species: "fat" },
        },
        shapes: [
          { shape: "rectangle", center: ["0 cm", "0 cm"], size: ["10 cm", "10 cm"], tissue: "a" },
          { shape: "rectangle", center: ["2 cm", "0 cm"], size: ["4 cm", "10 cm"], tissue: "b" }, // x ∈ [0, 4] cm
        ],
      },
      "two.json",
      3,
    );
    const d = 1 * MM, o = out();
    expect(cellContents(ph, -0.02, 0, 0, [d, 0, 0], [0, d, 0], [0, 0, d], o)).toBe(1);
    expect([o.tissue[0], o.fraction[0]]).toEqual([0, 1]);
    expect(cellContents(ph, 0.02, 0, 0, [d, 0, 0], [0, d, 0], [0, 0, d], o)).toBe(1);
    expect([o.tissue[0], o.fraction[0]]).toEqual([1, 1]);
    expect(cellContents(ph, 0.2, 0, 0, [d, 0, 0], [0, d, 0], [0, 0, d], o)).toBe(0);
    // straddling x = 0 at a quarter: 1/4 of b (painted later), 3/4 of a
    expect(cellContents(ph, -0.25 * d, 0, 0, [d, 0, 0], [0, d, 0], [0, 0, d], o)).toBe(2);
    expect(Array.from(o.tissue.subarray(0, 2))).toEqual([0, 1]);
    expect(o.fraction[0]).toBeCloseTo(0.75, 12);
    expect(o.fraction[1]).toBeCloseTo(0.25, 12);
    // straddling the outer edge at x = −5 cm: half gel, half empty (not reported)
    expect(cellContents(ph, -0.05, 0, 0, [d, 0, 0], [0, d, 0], [0, 0, d], o)).toBe(1);
    expect(o.fraction[0]).toBeCloseTo(0.5, 12);
  });

  test("cellContents throws RangeError when out is too small for the tissues present", () => {
    const ph = loadPhantom(join(PHANTOMS, "torso-slice.json"), 3);
    const d = 20 * MM; // a coarse cell over the spine holds several tissues
    expect(() => cellContents(ph, 0, -0.07, 0, [d, 0, 0], [0, d, 0], [0, 0, d], out(1))).toThrow(RangeError);
  });
});

describe("b0 expression", () => {
  const o = { file: "p.json", path: "b0.expression" };

  test("compileB0Expression(\"40 * (x / 0.1)^2\") gives 10 Hz at x = 5 cm and 0 at the centre", () => {
    const f = compileB0Expression("40 * (x / 0.1)^2", o);
    expect(f(0.05, 0.3, -1)).toBeCloseTo(10, 12);
    expect(f(0, 0, 0)).toBe(0);
    const g = compileB0Expression("5 * sin(2 * pi * y / 0.2) + hypot(x, z) * 100 - e", o);
    expect(g(0, 0.05, 0)).toBeCloseTo(5 - Math.E, 12);
  });

  test("parsePhantom compiles b0 and describes it", () => {
    const j = base();
    j.b0 = { expression: "40 * (x / 0.1)^2" };
    const ph = parsePhantom(j, "p.json", 3);
    expect(ph.b0!(0.1, 0, 0)).toBeCloseTo(40, 12);
    expect(ph.b0Description).toMatch(/40 \* \(x \/ 0.1\)\^2/);
  });

  for (const [expr, why] of [
    ["x = 3", /assignments/],
    ['import("fs")', /function "import" is not allowed/],
    ["q * x", /unknown symbol "q"/],
    ["f(x) = x^2", /function definitions/],
    ["5 cm", /unknown symbol "cm"/],
    ["x > 0 ? 1 : 0", /conditional|operator/],
    ["[x, y]", /matrix/],
    ["x!", /operator "!"/],
    ['"abc"', /not a number/],
  ] as const) {
    test(`compileB0Expression rejects ${JSON.stringify(expr)} with the key path`, () => {
      const e = userErrorOf(() => compileB0Expression(expr, o));
      expect(e.keyPath).toBe("b0.expression");
      expect(e.message).toMatch(why);
    });
  }

  test("parsePhantom rejects a b0 expression that is not real inside the phantom (sqrt(x) at x < 0)", () => {
    const j = base();
    j.b0 = { expression: "sqrt(x)" };
    const e = userErrorOf(() => parsePhantom(j, "p.json", 3));
    expect(e.keyPath).toBe("b0.expression");
    expect(e.message).toMatch(/finite real number/);
  });
});
