import { it } from "vitest";
import { buildSequence } from "../src/sequence/index.js";
import { logicalAxes } from "../src/protocol/geometry.js";
import { checkSliceConvergence } from "../src/engine/index.js";
import { isoOptionsFor } from "../src/cli/pipeline.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";

const disc = phantom({ tissues: { gel: tissue("800 ms", "80 ms") }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["6 cm", "6 cm"], tissue: "gel" }] });
function dc(r: ReturnType<typeof simulate>) { const k = r.kgrid; let m = 0; for (let i = 0; i < k.re.length; i++) m = Math.max(m, Math.hypot(k.re[i]!, k.im[i]!)); return m; }
it("print", () => {
  const cases: [string, Record<string, unknown>][] = [];
  for (const tbw of [2, 4, 8]) for (const c of [1, 2, 4]) cases.push([`se tbw${tbw} c${c}`, { sequence: "se", te: "40 ms", tr: "300 ms", crusherCycles: c, refocusing: { shape: "sinc", duration: `${0.75 * tbw} ms`, tbw, steps: 100 }, excitation: { shape: "sinc", duration: "2 ms", tbw: 4, steps: 100 } }]);
  for (const tbw of [2, 8]) for (const c of [1, 4]) cases.push([`rare tbw${tbw} c${c}`, { sequence: "rare", te: "40 ms", tr: "400 ms", echoTrainLength: 4, crusherCycles: c, refocusing: { shape: "sinc", duration: `${0.75 * tbw} ms`, tbw, steps: 100 }, excitation: { shape: "sinc", duration: "2 ms", tbw: 4, steps: 100 } }]);
  for (const tbw of [2, 8]) cases.push([`bssfp tbw${tbw}`, { sequence: "bssfp", te: "4 ms", tr: "8 ms", flip: "40 deg", excitation: { shape: "sinc", duration: "1.5 ms", tbw, steps: 100 } }]);
  for (const [name, over] of cases) {
    const p = proto({ ...over, matrix: { read: 4, phase: 4 }, oversampling: { read: 1, phase: 0 } });
    const base = { ...defaultIsochromatOptions(), density: 1, sliceCount: 12, sliceExtent: 3 };
    const o = isoOptionsFor(p, base);
    const t0 = Date.now();
    const a = simulate(p, disc, { sliceCount: 12, sliceExtent: 3, t2primeIsochromats: 1 });
    const t1 = Date.now();
    const ref = simulate(p, disc, { sliceCount: 600, sliceExtent: 3, t2primeIsochromats: 1 });
    const seq = buildSequence(p);
    const ax = logicalAxes(p);
    const t2 = Date.now();
    const cv = checkSliceConvergence(seq, [{ pd: 1, t1: 0.8, t2: 0.08 }], { axes: ax, thickness: p.slice.thickness, position: 0, offsetHz: 0 }, o.sliceCount, o.sliceExtent);
    const t3 = Date.now();
    const c = (p.crusherCycles as number) ?? 4;
    const oldN = p.sequence === "bssfp" ? 12 : Math.max(12, 3 * (4 * Math.ceil(c) + 1));
    const old = simulate(p, disc, { sliceCount: oldN, sliceExtent: 3, t2primeIsochromats: 1 });
    const dbl = simulate(p, disc, { sliceCount: 2 * o.sliceCount, sliceExtent: 3, t2primeIsochromats: 1 });
    const ref2 = simulate(p, disc, { sliceCount: 1800, sliceExtent: 3, t2primeIsochromats: 1 });
    const cvOld = checkSliceConvergence(seq, [{ pd: 1, t1: 0.8, t2: 0.08 }], { axes: ax, thickness: p.slice.thickness, position: 0, offsetHz: 0 }, oldN, 3);
    console.log(name, "old n", oldN, (100 * (dc(old) / dc(ref) - 1)).toFixed(2), "checkOld", cvOld.relativeChange.toExponential(2), "2n", (100 * (dc(dbl) / dc(ref) - 1)).toFixed(2), "ref1800", (100 * (dc(ref2) / dc(ref) - 1)).toFixed(3));
    console.log(name, "K", o.pathwayMoment.toFixed(2), "n", o.sliceCount, "sig", dc(a).toFixed(4), "ref", dc(ref).toFixed(4), "err%", (100 * (dc(a) / dc(ref) - 1)).toFixed(2), "check", cv.relativeChange.toExponential(2), "ms", t1 - t0, t3 - t2);
  }
}, 600000);
