/**
 * The library entry (src/index.ts) bundles for a browser: esbuild with
 * platform "browser" refuses to resolve any Node built-in, so a core module
 * that imports node:* (or a package that needs one) fails the build. The
 * bundle then runs a small simulation in a bare JavaScript context (node:vm,
 * no `process`, no `require`, no Node globals) and gives the same k-space
 * bits as the sources run under Node.
 */
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

  test("a build that pulls in a Node built-in fails (the check can fail)", async () => {
    await expect(build({
      stdin: { contents: 'import { readFileSync } from "node:fs"; export const x = readFileSync;', resolveDir: ROOT, loader: "ts" },
      bundle: true, platform: "browser", write: false, logLevel: "silent",
    })).rejects.toThrow(/node:fs/);
  });
});
