import { test } from "vitest";
import { loadPhantom, cellContents, phantomBounds } from "/work/main/src/phantom/index.js";
test("bench", () => {
  for (const name of ["torso-slice", "edge-grid", "two-bottle"]) {
    const ph = loadPhantom(`/work/main/phantoms/${name}.json`, 3);
    const b = phantomBounds(ph);
    const o = { tissue: new Int32Array(16), fraction: new Float64Array(16) };
    // ASCII render
    const W = 72, H = 36; const chars = ".abcdefghijklmnop";
    let s = "";
    const x0 = b.min[0], x1 = b.max[0], y0 = b.min[1], y1 = b.max[1];
    for (let j = H - 1; j >= 0; j--) { for (let i = 0; i < W; i++) {
      const n = cellContents(ph, x0 + (i + .5) * (x1 - x0) / W, y0 + (j + .5) * (y1 - y0) / H, 0, [(x1-x0)/W, 0, 0], [0, (y1-y0)/H, 0], [0, 0, 0.005], o);
      let best = -1, bf = 0; for (let q = 0; q < n; q++) if (o.fraction[q]! > bf) { bf = o.fraction[q]!; best = o.tissue[q]!; }
      s += best < 0 ? " " : chars[best + 1]; } s += "\n"; }
    console.log(name, ph.tissues.map((t, i) => chars[i + 1] + "=" + t.name).join(" ") + "\n" + s);
    // timing: 1000x1000 cells of 0.36 mm over the bounds
    const N = 1000; const dx = (x1 - x0) / N, dy = (y1 - y0) / N;
    const t0 = performance.now(); let tot = 0;
    for (let i = 0; i < N; i++) for (let j = 0; j < N; j++) tot += cellContents(ph, x0 + (i + .5) * dx, y0 + (j + .5) * dy, 0, [dx, 0, 0], [0, dy, 0], [0, 0, 0.005], o);
    console.log(name, "1e6 cells ms", (performance.now() - t0).toFixed(0), tot);
  }
});
