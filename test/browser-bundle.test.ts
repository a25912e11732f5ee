/**
 * The library entry (src/index.ts) bundles for a browser: esbuild with
 * platform "browser" refuses to resolve any Node built-in, so a core module
 * that imports node:* (or a package that needs one) fails the build. The
 * bundle then runs a small simulation in a bare JavaScript context (node:vm,
 * no `process`, no `require`, no Node globals) and gives the same k-space
 * bits as the sources run under Node. The dataset core (every module of
 * src/dataset/, simulate.ts included: it runs the coils on the executor it is given)
 * bundles the same way and runs in the bare context too.
 */
import { readdirSync } from "node:fs";
import { runInNewContext } from "node:vm";
import { build } from "esbuild";
import { describe, expect, test } from "vitest";
import { simulate as simulateHere } from "../src/index.js";

const ROOT = new URL("..", import.meta.url).pathname;

const PROTOCOL = {
  sequence: "gre", field: "1.5 T", fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 16, phase: 16 },
  slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, bandwidth: "250 Hz/px",
  te: "5 ms", tr: "20 ms", flip: "30 deg", excitation: { shape: "sinc", duration: "1 ms", tbw: 4, steps: 40 },
};
const PHANTOM = {
  name: "bundle-disc",
  tissues: { gel: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "40 ms", species: "water" } },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["4 cm", "4 cm"], tissue: "gel" }],
};
const ISO = { density: 1, sliceCount: 4, t2primeIsochromats: 4 };

describe("the library runs in a browser", () => {
  test("src/index.ts bundles for platform browser with no Node built-in and runs without Node globals", async () => {
    const r = await build({
      entryPoints: [`${ROOT}src/index.ts`], bundle: true, platform: "browser", format: "iife", globalName: "isofold",
      write: false, metafile: true, logLevel: "silent",
    });
    const inputs = Object.keys(r.metafile.inputs);
    expect(inputs.filter((f) => f.startsWith("node:") || f.includes("/cli/") || f.endsWith("pool.ts"))).toEqual([]);
    expect(inputs.some((f) => f.endsWith("src/api.ts"))).toBe(true);
    const code = r.outputFiles[0]!.text;

    // a bare context: ECMAScript built-ins, WebAssembly and a timer (as every page has), and no
    // SharedArrayBuffer (a page that is not cross-origin isolated): the arrays fall back to ordinary buffers
    const sandbox: Record<string, unknown> = { setTimeout };
    runInNewContext("delete globalThis.SharedArrayBuffer", sandbox);
    runInNewContext(`${code}\nglobalThis.isofold = isofold;`, sandbox);
    expect(runInNewContext("typeof process + typeof require + typeof Buffer + typeof SharedArrayBuffer + typeof WebAssembly", sandbox))
      .toBe("undefinedundefinedundefinedundefinedobject");
    const lib = sandbox.isofold as { simulate: typeof simulateHere };
    const inBundle = await lib.simulate({ protocol: PROTOCOL, phantom: PHANTOM, iso: ISO });
    const here = await simulateHere({ protocol: PROTOCOL, phantom: PHANTOM, iso: ISO });
    expect(inBundle.kspace.re.length).toBe(16 * 16 * 2);
    expect(Buffer.from(new Float64Array(inBundle.kspace.re).buffer).equals(Buffer.from(here.kspace.re.buffer))).toBe(true);
    expect(Buffer.from(new Float64Array(inBundle.kspace.im).buffer).equals(Buffer.from(here.kspace.im.buffer))).toBe(true);
    let max = 0;
    for (const v of here.magnitude) max = Math.max(max, v);
    expect(max).toBeGreaterThan(0.01);
  });

  test("the dataset core (every module of src/dataset/, simulate.ts and index.ts included) bundles for platform browser with no Node built-in and runs without Node globals", async () => {
    const core = readdirSync(`${ROOT}src/dataset`).filter((f) => f.endsWith(".ts")).sort();
    expect(core).toEqual(expect.arrayContaining(["batch.ts", "case.ts", "index.ts", "noise.ts", "raw.ts", "simulate.ts"]));
    const r = await build({
      stdin: { contents: core.map((f, i) => `export * as m${i} from "./src/dataset/${f.replace(/\.ts$/, ".js")}";`).join("\n"), resolveDir: ROOT, loader: "ts" },
      bundle: true, platform: "browser", format: "iife", globalName: "core", write: false, metafile: true, logLevel: "silent",
    });
    const inputs = Object.keys(r.metafile.inputs);
    expect(inputs.filter((f) => f.startsWith("node:") || f.includes("/cli/") || f.endsWith("pool.ts") || f.endsWith("engine/node.ts") || f.endsWith("atomic.ts"))).toEqual([]);
    for (const f of core) expect(inputs.some((x) => x.endsWith(`src/dataset/${f}`))).toBe(true);
    const sandbox: Record<string, unknown> = { TextDecoder };
    runInNewContext(`${r.outputFiles[0]!.text}\nglobalThis.core = core;`, sandbox);
    // in the bare context: a covariance read from JSON bytes, its Cholesky factor, and a manifest line round trip
    const out = runInNewContext(`(() => {
      const noise = Object.values(core).find((m) => m.parseCovariance && !m.simulateCoils), batch = Object.values(core).find((m) => m.parseManifest && !m.simulateCoils);
      const psi = noise.parseCovariance(new Uint8Array([...'[[4, 2], [2, 5]]'].map((c) => c.charCodeAt(0))), "psi.json", 2, "--noise-covariance");
      const L = noise.cholesky(psi, "--noise-covariance");
      const line = JSON.stringify({ case: 3, dir: "case-0003", key: "k", seed: 1, params: {}, files: { "a.npy": "00" } });
      return [Array.from(L.re), batch.manifestText(batch.parseManifest(line + "\\nnot json\\n"))];
    })()`, sandbox) as [number[], string];
    // L·Lᵀ = [[4, 2], [2, 5]]: L = [[2, 0], [1, 2]]
    expect(out[0]).toEqual([2, 0, 1, 2]);
    expect(out[1]).toBe(JSON.stringify({ case: 3, dir: "case-0003", key: "k", seed: 1, params: {}, files: { "a.npy": "00" } }) + "\n");
  });

  test("a build that pulls in a Node built-in fails (the check can fail)", async () => {
    await expect(build({
      stdin: { contents: 'import { readFileSync } from "node:fs"; export const x = readFileSync;', resolveDir: ROOT, loader: "ts" },
      bundle: true, platform: "browser", write: false, logLevel: "silent",
    })).rejects.toThrow(/node:fs/);
  });
});
