/**
 * Edge cases of the inputs, each with a defined behaviour (README, "Inputs
 * at the edges"): duplicate JSON keys, flip angles above 180 deg, T2 longer
 * than T1, matrix 1, an FOV smaller than the object, a shape finer than the
 * isochromat spacing, a field map holding NaN, shapes of zero size.
 */
import { spawnSync } from "node:child_process";
import { existsSync, readFileSync, writeFileSync } from "node:fs";
import { join, resolve } from "node:path";
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { checkJsonStructure, MAX_DEPTH, parseJsonStrict } from "../src/json.js";
import { loadPhantom, loadProtocol } from "../src/cli/inputs.js";
import { readRealNpy } from "../src/cli/pipeline.js";
import { decodeNpy, encodeNpy, type ComplexData } from "../src/io/npy.js";
import { tempDir, userErrorOf, writeJson } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");

const TINY = {
  sequence: "gre", field: "1.5 T", fov: { read: "8 cm", phase: "8 cm" }, matrix: { read: 4, phase: 4 },
  slice: { thickness: "5 mm" }, te: "5 ms", tr: "20 ms", flip: "30 deg", bandwidth: "500 Hz/px",
};
const GEL = { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "45 ms", species: "water" };
const disc = (extra: Record<string, unknown> = {}, tissue: Record<string, unknown> = GEL) => ({
  name: "disc", tissues: { gel: tissue },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 cm", "2 cm"], tissue: "gel" }], ...extra,
});


function cli(args: string[]) {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8", timeout: 30_000 });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}
const FAST = ["--density", "1", "--slice-isochromats", "2", "--t2prime-isochromats", "1", "--workers", "1", "-q"];

describe("duplicate JSON keys are rejected with the key named", () => {
  it("in a protocol file: key path and both lines", () => {
    const dir = tempDir();
    const f = join(dir, "p.json");
    writeFileSync(f, JSON.stringify(TINY, null, 2).replace(`"te": "5 ms",`, `"te": "5 ms",\n  "te": "9 ms",`));
    const e = userErrorOf(() => loadProtocol(f));
    expect(e.message).toContain(`duplicate key "te"`);
    expect(e.keyPath).toBe("te");
    expect(e.message).toMatch(/line \d+, column \d+ \(first at line \d+/);
  });

  it("in a phantom file, nested: shapes[0].center and tissues.gel", () => {
    const dir = tempDir();
    const f = join(dir, "ph.json");
    writeFileSync(f, JSON.stringify(disc()).replace(`"center":["0 cm","0 cm"]`, `"center":["0 cm","0 cm"],"center":["1 cm","0 cm"]`));
    expect(userErrorOf(() => loadPhantom(f, 1.5)).keyPath).toBe("shapes[0].center");
    writeFileSync(f, JSON.stringify(disc()).replace(`"tissues":{"gel":{`, `"tissues":{"gel":{"pd":0.5},"gel":{`));
    expect(userErrorOf(() => loadPhantom(f, 1.5)).keyPath).toBe("tissues.gel");
  });

  it("in a --set value given as JSON", () => {
    const dir = tempDir();
    const f = writeJson(dir, "p.json", TINY);
    const e = userErrorOf(() => loadProtocol(f, [`fov={"read":"8 cm","read":"4 cm"}`]));
    expect(e.message).toContain(`--set fov`);
    expect(e.message).toContain(`duplicate key "read"`);
  });

  // oracle: JSON.stringify never writes a key twice, and a key added twice to an object's text is a duplicate
  it("property: no false alarm on any serialised JSON value, and every injected duplicate is found", () => {
    let tried = 0;
    fc.assert(
      fc.property(fc.jsonValue({ maxDepth: 6 }), fc.string({ maxLength: 8 }), (v, key) => {
        tried++;
        const text = JSON.stringify(v);
        expect(() => checkJsonStructure(text, "x")).not.toThrow();
        const dup = `{${JSON.stringify(key)}:1,"a":${text},${JSON.stringify(key)}:2}`;
        const e = userErrorOf(() => checkJsonStructure(dup, "x"));
        expect(e.detail).toContain(`duplicate key ${JSON.stringify(key)}`);
      }),
      { seed: 9, numRuns: 300 },
    );
    expect(tried).toBe(300);
  });

  it(`nesting deeper than ${MAX_DEPTH} levels is a user error, ${MAX_DEPTH} levels are read`, () => {
    const deep = (n: number) => "[".repeat(n) + "]".repeat(n);
    expect(() => parseJsonStrict(deep(MAX_DEPTH), "f")).not.toThrow();
    expect(userErrorOf(() => parseJsonStrict(deep(MAX_DEPTH + 1), "f")).message).toContain("nested more than");
    expect(userErrorOf(() => parseJsonStrict(deep(100000), "f")).message).toContain("nested more than");
  });
});

describe("flip angles above 180 deg are rejected", () => {
  it("181 deg and 270 deg fail naming 180 deg and the equivalent angle; 180 deg is accepted", () => {
    const dir = tempDir();
    const f = writeJson(dir, "p.json", TINY);
    expect(loadProtocol(f, ["flip=180 deg"]).flip).toBeCloseTo(Math.PI, 12);
    const e = userErrorOf(() => loadProtocol(f, ["flip=270 deg"]));
    expect(e.message).toContain("above 180 deg");
    // a rotation by 270° about +x equals one by 90° about −x (rotation angles are defined modulo 360°, common practice)
    expect(e.message).toContain("90 deg is the same rotation");
    expect(userErrorOf(() => loadProtocol(f, ["flip=181 deg"])).file).toBe("--set flip");
    expect(userErrorOf(() => loadProtocol(f, ["refocusFlip=3.2 rad"])).file).toBe("--set refocusFlip");
    const g = writeJson(dir, "q.json", { ...TINY, flip: "200 deg" });
    expect(userErrorOf(() => loadProtocol(g)).keyPath).toBe("flip");
  });
});

describe("T2 longer than T1", () => {
  it("T1 < T2 ≤ 2·T1 loads with a warning naming the tissue; T2 > 2·T1 is an error", () => {
    const dir = tempDir();
    const warn = loadPhantom(writeJson(dir, "a.json", disc({}, { ...GEL, t1: "100 ms", t2: "150 ms", t2star: "50 ms" })), 1.5);
    expect(warn.warnings.some((w) => w.includes(`"gel"`) && w.includes("longer than T1"))).toBe(true);
    const ok = loadPhantom(writeJson(dir, "b.json", disc()), 1.5);
    expect(ok.warnings.some((w) => w.includes("longer than T1"))).toBe(false);
    const e = userErrorOf(() => loadPhantom(writeJson(dir, "c.json", disc({}, { ...GEL, t1: "100 ms", t2: "201 ms", t2star: "50 ms" })), 1.5));
    expect(e.keyPath).toBe("tissues.gel.t2");
  });
});

describe("zero-size shapes and NaN field maps", () => {
  it("a size of zero is rejected for every shape type, naming the key", () => {
    const dir = tempDir();
    const cases: [Record<string, unknown>, string][] = [
      [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "0 cm" }, "shapes[0].radius"],
      [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["0 cm", "1 cm"] }, "shapes[0].semiAxes[0]"],
      [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["1 cm", "0 mm"] }, "shapes[0].size[1]"],
      [{ shape: "box", center: ["0 cm", "0 cm", "0 cm"], size: ["1 cm", "1 cm", "0 m"] }, "shapes[0].size[2]"],
      [{ shape: "cylinder", center: ["0 cm", "0 cm", "0 cm"], radius: "1 cm", length: "0 cm" }, "shapes[0].length"],
      [{ shape: "ellipsoid", center: ["0 cm", "0 cm", "0 cm"], semiAxes: ["1 cm", "-1 cm", "1 cm"] }, "shapes[0].semiAxes[1]"],
    ];
    for (const [shape, path] of cases) {
      const f = writeJson(dir, "z.json", { name: "z", tissues: { gel: GEL }, shapes: [{ ...shape, tissue: "gel" }] });
      const e = userErrorOf(() => loadPhantom(f, 1.5));
      expect(e.keyPath).toBe(path);
      expect(e.detail).toContain("greater than zero");
    }
  });

  it("a field map holding NaN or Infinity is rejected naming the element; a finite one loads", () => {
    const dir = tempDir();
    for (const [bad, word] of [[NaN, "NaN"], [Infinity, "Infinity"]] as const) {
      const data = new Float64Array(16).fill(3);
      data[5] = bad;
      writeFileSync(join(dir, "map.npy"), encodeNpy({ dtype: "float64", shape: [4, 4], data }));
      const f = writeJson(dir, "b.json", disc({ b0: { fieldMap: { file: "map.npy", origin: ["-4 cm", "-4 cm", "0 cm"], spacing: ["2 cm", "2 cm", "1 cm"] } } }));
      const e = userErrorOf(() => loadPhantom(f, 1.5, { readArray: readRealNpy }));
      expect(e.keyPath).toBe("b0.fieldMap.file");
      expect(e.detail).toContain(`element 5 is ${word}`);
    }
    writeFileSync(join(dir, "map.npy"), encodeNpy({ dtype: "float64", shape: [4, 4], data: new Float64Array(16).fill(3) }));
    const ph = loadPhantom(join(dir, "b.json"), 1.5, { readArray: readRealNpy });
    expect(ph.b0!(0, 0, 0)).toBe(3);
  });
});

describe("grids at the edges (compiled CLI)", () => {
  it("matrix 1 runs: with no read oversampling the 1×1 image equals the one k-space sample (a length-1 DFT is the identity)", () => {
    const dir = tempDir();
    const p = writeJson(dir, "p.json", { ...TINY, matrix: { read: 1, phase: 1 }, oversampling: { read: 1, phase: 0 } });
    const ph = writeJson(dir, "ph.json", disc());
    const r = cli(["simulate", ph, "-p", p, "-o", join(dir, "run"), ...FAST]);
    expect(r.stderr.split("\n").filter((l) => l !== "" && !l.startsWith("warning: "))).toEqual([]);
    expect(r.code).toBe(0);
    const k = decodeNpy(readFileSync(join(dir, "run", "kspace.npy")), "k");
    const im = decodeNpy(readFileSync(join(dir, "run", "image.npy")), "i");
    expect(k.shape).toEqual([1, 1, 1, 1]);
    expect(im.shape).toEqual([1, 1, 1, 1]);
    const kd = k.data as ComplexData, id = im.data as ComplexData;
    expect(Math.hypot(kd.re[0]!, kd.im[0]!)).toBeGreaterThan(0);
    expect(id.re[0]).toBe(kd.re[0]);
    expect(id.im[0]).toBe(kd.im[0]);
  });

  it("an FOV smaller than the object runs and warns that it folds along phase and is cut along read", () => {
    const dir = tempDir();
    const p = writeJson(dir, "p.json", { ...TINY, fov: { read: "1 cm", phase: "1 cm" } });
    const ph = writeJson(dir, "ph.json", disc());
    const r = cli(["simulate", ph, "-p", p, "-o", join(dir, "run"), ...FAST]);
    expect(r.stderr.split("\n").filter((l) => l !== "" && !l.startsWith("warning: "))).toEqual([]);
    expect(r.code).toBe(0);
    const rep = JSON.parse(readFileSync(join(dir, "run", "report.json"), "utf8")) as { warnings: string[] };
    expect(rep.warnings.some((w) => w.includes("along phase") && w.includes("fold over"))).toBe(true);
    expect(rep.warnings.some((w) => w.includes("along read") && w.includes("receiver filter"))).toBe(true);
  });

  it("a shape finer than the isochromat spacing: a warning when the run goes ahead, named in the error when nothing is sampled", () => {
    const dir = tempDir();
    const p = writeJson(dir, "p.json", TINY);
    // a 0.1 mm sphere on an 8 cm / 4 grid with density 1 (20 mm spacing), off the sample points
    const speck = { shape: "sphere", center: ["3 mm", "3 mm", "0 mm"], radius: "0.05 mm", tissue: "gel", label: "speck" };
    const alone = writeJson(dir, "a.json", { name: "s", tissues: { gel: GEL }, shapes: [speck] });
    const r = cli(["simulate", alone, "-p", p, "-o", join(dir, "a"), ...FAST]);
    expect(r.code).toBe(2);
    expect(r.stderr.trim().split("\n")).toHaveLength(1);
    expect(r.stderr).toContain("finer than the isochromat spacing of 20.0 mm");
    expect(existsSync(join(dir, "a"))).toBe(false);
    const both = writeJson(dir, "b.json", { ...disc(), shapes: [...disc().shapes, speck] });
    const r2 = cli(["simulate", both, "-p", p, "-o", join(dir, "b"), ...FAST]);
    expect(r2.code).toBe(0);
    const rep = JSON.parse(readFileSync(join(dir, "b", "report.json"), "utf8")) as { warnings: string[] };
    expect(rep.warnings.some((w) => w.startsWith(`shapes[1] ("speck") is 0.100 mm across`))).toBe(true);
  });
});
