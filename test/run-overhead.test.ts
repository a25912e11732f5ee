/**
 * The shortcuts a whole run() takes outside the engine, each against the
 * direct computation it replaces: the single slice's sequence (the one built
 * for the protocol, not built again), the run folder's magnitudes (taken from
 * the result's `magnitude`, not computed again), and the truth maps' typed
 * pass over tiles (against cellContents on every pixel with the tissue
 * objects, as the maps are defined in analysis/truth.ts).
 */
import { readdirSync, readFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import { prepareSimulation, simulate } from "../src/api.js";
import { loadPhantom, loadProtocol } from "../src/cli/inputs.js";
import { buildSequence } from "../src/sequence/index.js";
import { cellContents } from "../src/phantom/index.js";
import { logicalAxes } from "../src/protocol/index.js";
import { truthMaps } from "../src/analysis/truth.js";
import { writeRunFolder } from "../src/io/run-folder.js";
import { tempDir } from "./helpers.js";

const ROOT = resolve(import.meta.dirname, "..");
const TWO_BOTTLE = join(ROOT, "phantoms", "two-bottle.json");
const SMALL = ["matrix.read=32", "matrix.phase=32"];

describe("prepareSimulation: one slice", () => {
  for (const name of ["gre-t1-3t", "se-t2-1.5t", "epi-1.5t", "bssfp-1.5t", "gre3d-t1-1.5t"]) {
    it(`${name}: the slice's sequence equals the one built for the slice's own protocol`, () => {
      const sets = name.startsWith("gre3d") ? [...SMALL, "matrix.slice=8", "slice.position=3 mm"] : [...SMALL, "slice.position=3 mm"];
      const protocol = loadProtocol(name, sets);
      const phantom = loadPhantom(TWO_BOTTLE, protocol.field);
      const prep = prepareSimulation({ parsedProtocol: protocol, parsedPhantom: phantom, iso: { density: 1, sliceCount: 4 }, convergenceCheck: false });
      expect(prep.slices).toHaveLength(1);
      const sl = prep.slices[0]!;
      expect(sl.seq).toEqual(buildSequence({ ...protocol, slice: { ...protocol.slice, position: sl.position } }));
    });
  }
});

describe("writeRunFolder: the result's magnitude", () => {
  it("gives the same bytes in every file as computing |image| again", async () => {
    const protocol = loadProtocol("gre-demo-1.5t", SMALL);
    const phantom = loadPhantom(TWO_BOTTLE, protocol.field);
    const r = await simulate({ parsedProtocol: protocol, parsedPhantom: phantom, iso: { density: 1, sliceCount: 6 } });
    const dirs = [tempDir("isofold-overhead-"), tempDir("isofold-overhead-")].map((d) => join(d, "run"));
    const input = (withMagnitude: boolean) => ({
      kspace: r.kspace, image: r.image, affine: r.affine, voxelMm: r.voxelMm, report: structuredClone(r.report),
      ...(withMagnitude ? { magnitude: r.magnitude } : {}),
    });
    await writeRunFolder(dirs[0]!, input(true));
    await writeRunFolder(dirs[1]!, input(false));
    const files = readdirSync(dirs[0]!).sort();
    expect(files).toEqual(readdirSync(dirs[1]!).sort());
    expect(files).toContain("image.nii");
    for (const f of files) expect(Buffer.compare(readFileSync(join(dirs[0]!, f)), readFileSync(join(dirs[1]!, f))), f).toBe(0);
  }, 60_000);
});

describe("truthMaps", () => {
  it("equals cellContents on every pixel with the tissue objects (bitwise), oblique and axial", () => {
    for (const sets of [SMALL, [...SMALL, "slice.angle=20 deg", "slice.orientation=coronal", "phaseDirection=x"]]) {
      const protocol = loadProtocol("gre-demo-1.5t", sets);
      const ph = loadPhantom(TWO_BOTTLE, protocol.field);
      const axes = logicalAxes(protocol);
      const nRead = 40, nPhase = 36, dx = 0.004, dy = 0.0045, thickness = protocol.slice.thickness, position = protocol.slice.position, offsetHz = 7;
      const m = truthMaps(ph, { axes, nRead, nPhase, dx, dy, thickness, position, offsetHz });
      const e1 = axes.read.map((a) => a * dx), e2 = axes.phase.map((a) => a * dy), e3 = axes.slice.map((a) => a * thickness);
      const out = { tissue: new Int32Array(ph.tissues.length + 1), fraction: new Float64Array(ph.tissues.length + 1) };
      let filled = 0;
      for (let j = 0; j < nPhase; j++) {
        for (let i = 0; i < nRead; i++) {
          const u = (i - Math.floor(nRead / 2)) * dx, v = (j - Math.floor(nPhase / 2)) * dy;
          const x = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * position;
          const y = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * position;
          const z = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * position;
          const n = cellContents(ph, x, y, z, e1, e2, e3, out);
          let pd = 0, w = 0, t1 = 0, t2 = 0, t2s = 0, ff = 0, best = -1, bestF = 0;
          for (let q = 0; q < n; q++) {
            const t = ph.tissues[out.tissue[q]!]!, f = out.fraction[q]!;
            pd += f * t.pd;
            const wt = f * t.pd;
            w += wt; t1 += wt * t.t1; t2 += wt * t.t2; t2s += wt * t.t2star; ff += wt * t.fatFraction;
            if (f > bestF) { bestF = f; best = out.tissue[q]!; }
          }
          const k = j * nRead + i;
          if (n > 0) filled++;
          expect(Object.is(m.pd[k], pd)).toBe(true);
          expect(Object.is(m.label[k], best + 1)).toBe(true);
          expect(Object.is(m.df[k], (ph.b0 ? ph.b0(x, y, z) : 0) + offsetHz)).toBe(true);
          if (w > 0) {
            expect([m.t1[k], m.t2[k], m.t2star[k], m.fatFraction[k]]).toEqual([t1 / w, t2 / w, t2s / w, ff / w]);
          } else expect([m.t1[k], m.t2[k], m.t2star[k], m.fatFraction[k]]).toEqual([0, 0, 0, 0]);
        }
      }
      // the grid holds tissue and empty pixels both
      expect(filled).toBeGreaterThan(0);
      expect(filled).toBeLessThan(nRead * nPhase);
    }
  });
});

describe("report plots: runtime specifications reused across data", () => {
  it("a plot that differs from an earlier one only in its values gives the SVG of compiling and parsing it afresh", async () => {
    const { lineSpec, loadPlotLibraries, runtimeCacheHits, runtimeSpec, vegaLiteSvg } = await import("../src/report/plots.js");
    const [vega, vl] = await loadPlotLibraries();
    const direct = async (spec: Record<string, unknown>) => {
      const view = new vega.View(vega.parse(vl.compile(spec as never).spec), { renderer: "none" });
      try {
        return await view.toSVG();
      } finally {
        view.finalize();
      }
    };
    const profile = (n: number, k: number, names: string[]) => lineSpec({
      title: `profile of ${names.length} series`, xTitle: "position (mm)", yTitle: "magnitude (a.u.)",
      series: names.map((name, s) => ({ name, points: Array.from({ length: n }, (_, c) => ({ x: (c - n / 2) * 0.7, y: s + Math.abs(Math.sin(0.3 * c * k)) * (c % 7 === 0 ? -1 : 1) })) })),
    });
    const hits0 = runtimeCacheHits();
    let served = 0;
    for (const names of [["image"], ["water", "fat"]]) {
      for (const n of [12, 256]) {
        for (const k of [1, 2, 3]) {
          const spec = profile(n, k, names);
          // the runtime specification itself: the same as made afresh
          expect(runtimeSpec(vega, vl, profile(n, k, names))).toEqual(vega.parse(vl.compile(profile(n, k, names) as never).spec));
          expect(await vegaLiteSvg(spec)).toBe(await direct(profile(n, k, names)));
          served += 2;
        }
      }
    }
    // every value set after the first of each shape came from the cache
    expect(runtimeCacheHits() - hits0).toBe(served - 4);
  }, 60_000);
});
