/**
 * The library API (src/index.ts): simulate() on in-memory objects, the
 * executors giving the same bits, abort and progress, user errors, the
 * package's "exports", and the worker pool running the sources under test.
 */
import { spawnSync } from "node:child_process";
import { describe, expect, test } from "vitest";
import { simulate, serialExecutor, simulateSerial, AbortedError, UserError, type SimulateInput } from "../src/index.js";
import { nodeExecutor, workerPath } from "../src/engine/node.js";

const T1 = 0.2, T2 = 0.05, TR = 0.02, TE = 0.004, FLIP = 30;
const PROTOCOL = {
  sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16 },
  slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, bandwidth: "500 Hz/px",
  te: `${TE * 1e3} ms`, tr: `${TR * 1e3} ms`, flip: `${FLIP} deg`, dummyScans: 60,
  excitation: { shape: "hard", duration: "0.05 ms", steps: 4 }, oversampling: { read: 2, phase: 0 },
};
const PHANTOM = {
  name: "library-disc",
  tissues: { gel: { pd: 1, t1: `${T1 * 1e3} ms`, t2: `${T2 * 1e3} ms`, t2star: `${T2 * 1e3} ms`, species: "water" } },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["6 cm", "6 cm"], tissue: "gel" }],
};
const INPUT: SimulateInput = { protocol: PROTOCOL, phantom: PHANTOM, iso: { density: 2, sliceCount: 1, sliceExtent: 1, t2primeIsochromats: 1 } };

describe("simulate()", () => {
  test("returns k-space and image arrays with their axes, the report and warnings; the disc's signal follows the Ernst equation", async () => {
    const r = await simulate(INPUT);
    expect(r.axes).toEqual(["coil", "slice", "phase", "read"]);
    expect([r.kspace.coils, r.kspace.slice, r.kspace.phase, r.kspace.read]).toEqual([1, 1, 16, 32]);
    expect([r.image.coils, r.image.slice, r.image.phase, r.image.read]).toEqual([1, 1, 16, 16]);
    expect(r.report.safety).toMatch(/not a medical device/);
    expect(r.report.warnings).toBe(r.warnings);
    expect((r.report.sequence as { name: string }).name).toBeTruthy();
    // steady state of an ideally spoiled gradient echo (Ernst & Anderson 1966, Rev Sci Instrum 37:93):
    // S = M0·sin α·(1 − E1)/(1 − E1·cos α)·exp(−TE/T2), E1 = exp(−TR/T1); PD 1 fills the voxel, so M0 = 1
    const a = (FLIP * Math.PI) / 180, e1 = Math.exp(-TR / T1);
    const ernst = (Math.sin(a) * (1 - e1)) / (1 - e1 * Math.cos(a)) * Math.exp(-TE / T2);
    // the image summed over the FOV is the k = 0 sample: the disc's area (π·6², 1 cm pixels) times S, free of Gibbs ringing
    let sr = 0, si = 0;
    for (let i = 0; i < 16 * 16; i++) { sr += r.image.re[i]!; si += r.image.im[i]!; }
    expect(Math.abs(Math.hypot(sr, si) / (Math.PI * 36) / ernst - 1)).toBeLessThan(5e-3);
  });

  test("serial, 1 and 2 worker threads and simulateSerial give the same k-space bits, and so does wasm off", async () => {
    // the direct readout operator, so the chunks really run on the executors (the fast one runs on the calling thread)
    const small = { ...INPUT, chunkIsochromats: 64, readout: "direct" as const };
    const serial = await simulate({ ...small, executor: serialExecutor() });
    for (const w of [1, 2]) {
      const par = await simulate({ ...small, executor: nodeExecutor(w) });
      expect(Buffer.from(par.kspace.re.buffer).equals(Buffer.from(serial.kspace.re.buffer))).toBe(true);
      expect(Buffer.from(par.kspace.im.buffer).equals(Buffer.from(serial.kspace.im.buffer))).toBe(true);
    }
    expect((serial.report.engine as { chunks: number }).chunks).toBeGreaterThan(4);
    const seq = serial.sequences[0]!;
    expect(seq).toBeDefined();
    // the TypeScript twins of the WebAssembly kernels compute in the kernels' order (engine/wasm.ts)
    const scalar = await simulate({ ...small, wasm: false });
    expect(Buffer.from(scalar.kspace.re.buffer).equals(Buffer.from(serial.kspace.re.buffer))).toBe(true);
    expect(Buffer.from(scalar.kspace.im.buffer).equals(Buffer.from(serial.kspace.im.buffer))).toBe(true);
  });

  test("progress reaches the total; an aborted signal rejects with AbortedError", async () => {
    let last = { done: 0, total: -1 };
    const direct = { ...INPUT, readout: "direct" as const };
    await simulate({ ...direct, chunkIsochromats: 64, onProgress: (p) => { last = p; } });
    expect(last.done).toBe(last.total);
    const ac = new AbortController();
    const stop = simulate({ ...direct, chunkIsochromats: 64, signal: ac.signal, onProgress: (p) => { if (p.done === 2) ac.abort(); } });
    await expect(stop).rejects.toBeInstanceOf(AbortedError);
    const pre = new AbortController();
    pre.abort();
    await expect(simulate({ ...direct, signal: pre.signal, executor: nodeExecutor(2) })).rejects.toBeInstanceOf(AbortedError);
    // the fast readout operator checks the signal too
    await expect(simulate({ ...INPUT, readout: "fast", signal: pre.signal })).rejects.toBeInstanceOf(AbortedError);
  });

  test("overrides apply and a bad one is a UserError naming the override", async () => {
    const r = await simulate({ ...INPUT, sets: ["matrix.phase=8"] });
    expect(r.image.phase).toBe(8);
    const e = await simulate({ ...INPUT, sets: ["te=soon"] }).catch((x: unknown) => x);
    expect(e).toBeInstanceOf(UserError);
    expect((e as Error).message).toMatch(/--set te/);
    const e2 = await simulate({ ...INPUT, protocol: { ...PROTOCOL, extend: "gre-demo-1.5t" } }).catch((x: unknown) => x);
    expect(e2).toBeInstanceOf(UserError);
    expect((e2 as Error).message).toMatch(/extend/);
  });

  test("simulateSerial on the same sequence and isochromats agrees bitwise with simulate()", async () => {
    const { prepareSimulation } = await import("../src/index.js");
    const prep = prepareSimulation(INPUT);
    const r = await simulate(INPUT);
    const direct = simulateSerial(prep.first.seq, prep.first.iso, { receiverFilter: true });
    expect(Buffer.from(direct.kspace.re.buffer).equals(Buffer.from(r.runs[0]!.re.buffer))).toBe(true);
    expect((r.report.engine as { readout: { operator: string } }).readout.operator).toBe(direct.readout.operator);
  });
});

describe("packaging", () => {
  test("the worker pool runs the TypeScript sources under vitest, not a compiled copy in dist/", () => {
    // bundled in memory from src/engine/worker.ts and its imports (no file in dist/, none left in the temporary folder)
    const p = workerPath();
    expect(p).toBeInstanceOf(URL);
    const url = String(p);
    expect(url.startsWith("data:text/javascript;base64,")).toBe(true);
    const code = Buffer.from(url.slice(url.indexOf(",") + 1), "base64").toString("utf8");
    expect(code).toContain("src/engine/worker.ts");
    expect(code).toContain("function runChunkSpoiled(");
  });

  test('"isofold" and "isofold/node" resolve through package.json exports (compiled)', () => {
    const code = 'const a = await import("isofold"); const b = await import("isofold/node"); console.log(typeof a.simulate, typeof a.parsePhantom, typeof a.parseProtocol, typeof b.nodeExecutor, typeof a.nodeExecutor);';
    const r = spawnSync(process.execPath, ["--input-type=module", "-e", code], { encoding: "utf8", cwd: new URL("..", import.meta.url).pathname });
    expect(r.stderr).toBe("");
    expect(r.stdout.trim()).toBe("function function function function undefined");
  });
});
