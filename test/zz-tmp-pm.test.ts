import { it } from "vitest";
import { isoOptionsFor } from "../src/cli/pipeline.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import { listPresets, loadProtocol } from "../src/protocol/index.js";
it("print", () => {
  for (const name of listPresets()) {
    const p = loadProtocol(name, []);
    const row = [2, 4, 6].map((o) => { process.env.ISOFOLD_PATHWAY_ORDER = String(o); const r = isoOptionsFor(p, defaultIsochromatOptions()); return `${r.sliceCount}(K${r.pathwayMoment.toFixed(1)})`; });
    console.log("preset", name, p.sequence, row.join(" "));
  }
});
