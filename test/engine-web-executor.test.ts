/**
 * The Web Worker executor (engine/web.ts) against the serial executor: the
 * same k-space bits (the chunk partials are summed in the fixed order of
 * sum.ts whoever runs them), for one and three workers, many chunks and many
 * RF classes (a B0 gradient gives each isochromat column its own off-resonance,
 * so the RF maps are filled by the workers), and after an aborted run the same
 * workers give the same bits again. The workers here are in-process stand-ins
 * that keep what a browser guarantees: each message is a structured clone
 * (ArrayBuffers transferred, SharedArrayBuffers shared), delivered later, in
 * order. The page's real Web Workers are checked in test/preview-browser.test.ts.
 */
import { describe, expect, test } from "vitest";
import { simulate } from "../src/api.js";
import { AbortedError, PARALLEL_RF_CLASSES, serialExecutor, webWorkerExecutor } from "../src/engine/index.js";
import { standIns } from "./web-standins.js";

const PROTOCOL = {
  sequence: "gre", field: "1.5 T", fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 24, phase: 24 },
  slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, bandwidth: "250 Hz/px",
  te: "5 ms", tr: "20 ms", flip: "30 deg", excitation: { shape: "sinc", duration: "1 ms", tbw: 4, steps: 24 },
};
const PHANTOM = {
  name: "web-executor-disc",
  tissues: { gel: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "40 ms", species: "water" } },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["4 cm", "3 cm"], tissue: "gel" }],
  // a B0 gradient along x and y: off-resonance differs between isochromats, so RF classes are many
  b0: { expression: "300 * x + 170 * y" },
};
const ISO = { density: 2, sliceCount: 4, t2primeIsochromats: 1 };

const bits = (a: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

describe("Web Worker executor", () => {
  test("bitwise the serial executor's k-space with 1 and 3 workers; an aborted run leaves the workers usable", async () => {
    const opts = { protocol: PROTOCOL, phantom: PHANTOM, iso: ISO, readout: "direct" as const, chunkIsochromats: 256, convergenceCheck: false };
    const serial = await simulate({ ...opts, executor: serialExecutor() });
    const engine = serial.report["engine"] as { chunks: number; rfClasses: number };
    expect(engine.chunks).toBeGreaterThan(6);
    expect(engine.rfClasses).toBeGreaterThanOrEqual(PARALLEL_RF_CLASSES);
    for (const n of [1, 3]) {
      const ex = webWorkerExecutor(standIns(n));
      const r = await simulate({ ...opts, executor: ex });
      expect(bits(r.kspace.re).equals(bits(serial.kspace.re)), `${n} workers, re`).toBe(true);
      expect(bits(r.kspace.im).equals(bits(serial.kspace.im)), `${n} workers, im`).toBe(true);
      if (n === 3) {
        const ac = new AbortController();
        let seen = 0;
        await expect(simulate({ ...opts, executor: ex, signal: ac.signal, onProgress: () => { if (++seen === 2) ac.abort(); } })).rejects.toBeInstanceOf(AbortedError);
        const again = await simulate({ ...opts, executor: ex });
        expect(bits(again.kspace.re).equals(bits(serial.kspace.re))).toBe(true);
        expect(bits(again.kspace.im).equals(bits(serial.kspace.im))).toBe(true);
      }
    }
    let max = 0;
    for (const v of serial.magnitude) max = Math.max(max, v);
    expect(max).toBeGreaterThan(0.01);
  });
});
