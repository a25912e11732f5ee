import { it } from "vitest";
import { isoOptionsFor } from "../src/cli/pipeline.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";
const disc = phantom({ tissues: { gel: tissue("800 ms", "80 ms") }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["6 cm", "6 cm"], tissue: "gel" }] });
function rel(a: ReturnType<typeof simulate>, b: ReturnType<typeof simulate>) { let n = 0, d = 0; for (let i = 0; i < a.kgrid.re.length; i++) { n += (a.kgrid.re[i]! - b.kgrid.re[i]!) ** 2 + (a.kgrid.im[i]! - b.kgrid.im[i]!) ** 2; d += b.kgrid.re[i]! ** 2 + b.kgrid.im[i]! ** 2; } return Math.sqrt(n / d); }
it("print", () => {
  for (const [c, tbw, etl] of [[4, 4, 8], [1, 2, 8], [2, 8, 8], [8, 4, 16]]) {
    const p = proto({ sequence: "rare", te: "40 ms", tr: "400 ms", echoTrainLength: etl, crusherCycles: c, refocusing: { shape: "sinc", duration: `${0.75 * tbw} ms`, tbw, steps: 100 }, excitation: { shape: "sinc", duration: "2 ms", tbw: 4, steps: 100 }, matrix: { read: 16, phase: 16 }, oversampling: { read: 1, phase: 0 } });
    const ref = simulate(p, disc, { sliceCount: 2400, sliceExtent: 3, t2primeIsochromats: 1 });
    for (const order of [2, 4, 6, 8]) {
      process.env.ISOFOLD_PATHWAY_ORDER = String(order);
      const n = isoOptionsFor(p, { ...defaultIsochromatOptions(), sliceCount: 12, sliceExtent: 3 }).sliceCount;
      console.log("rare c", c, "tbw", tbw, "etl", etl, "order", order, "n", n, (100 * rel(simulate(p, disc, { sliceCount: n, sliceExtent: 3, t2primeIsochromats: 1 }), ref)).toFixed(3));
    }
  }
}, 600000);
