/**
 * Shared test helpers: temporary input files and the one in-process
 * pipeline of the tests (runPipeline), which is the library's own —
 * prepareSimulation (parse, sequence, isochromat options and geometry of the
 * pipeline), the serial engine, reconstructRuns — so a test simulates what
 * the command line and simulate() do.
 */
import assert from "node:assert/strict";
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { prepareSimulation, reconstructRuns, type Volume } from "../src/api.js";
import { simulateSerial, type EnginePlan, type KSpace } from "../src/engine/index.js";
import { defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "../src/isochromats/index.js";
import { magnitude } from "../src/recon/reconstruct.js";
import type { Protocol } from "../src/protocol/index.js";
import type { Phantom } from "../src/phantom/index.js";
import type { Sequence } from "../src/sequence/index.js";
import { expect, vi } from "vitest";
import { Command } from "commander";
import { registerProtocol } from "../src/cli/protocol.js";
import { UserError } from "../src/errors.js";

/** The thrown error of f, which must be a UserError. */
export function userErrorOf(f: () => unknown): UserError {
  try {
    f();
  } catch (e) {
    expect(e).toBeInstanceOf(UserError);
    return e as UserError;
  }
  throw new Error("expected a UserError, nothing was thrown");
}

/**
 * `isofold dataset <args>` in this process (no start-up cost), its stdout
 * silenced; throws what the command throws. Loaded on first use, so tests
 * that never call it do not load the command line.
 */
export async function datasetInProcess(args: string[]): Promise<void> {
  const [{ Command }, { registerDataset }] = await Promise.all([import("commander"), import("../src/cli/dataset.js")]);
  const program = new Command();
  registerDataset(program);
  const log = console.log;
  console.log = () => {};
  try {
    await program.parseAsync(["dataset", ...args], { from: "user" });
  } finally {
    console.log = log;
  }
}

export { tempDir } from "./tempdirs.js";

export function writeJson(dir: string, name: string, value: unknown): string {
  const p = join(dir, name);
  writeFileSync(p, JSON.stringify(value, null, 2));
  return p;
}

/** A uniform disc phantom of radius r (cm) with the given tissue values (strings with units). */
export function discPhantom(radiusCm: number, tissue: Record<string, unknown>, b0?: string): Record<string, unknown> {
  return {
    name: "test-disc",
    description: "test object",
    tissues: { t: tissue },
    shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: [`${radiusCm} cm`, `${radiusCm} cm`], tissue: "t" }],
    ...(b0 ? { b0: { expression: b0 } } : {}),
  };
}

export interface PipelineResult {
  protocol: Protocol;
  phantom: Phantom;
  /** Sequence and isochromats of the first slice holding any (the one simulated). */
  seq: Sequence;
  iso: IsochromatSet;
  /** Engine k-space as acquired [coil][row][read], and the plan. */
  kspace: KSpace;
  plan: EnginePlan;
  /** Σ m0 of the simulated isochromats. */
  m0Total: number;
  /** Acquired k-space as a volume, the full grid, the image and |image|. */
  kacq: Volume;
  kgrid: Volume;
  image: Volume;
  mag: Float64Array;
}

function isParsedProtocol(p: unknown): p is Protocol {
  return typeof (p as Protocol).pixelBandwidth === "number";
}
function isParsedPhantom(p: unknown): p is Phantom {
  return Array.isArray((p as Phantom).tissues) && typeof (p as Phantom).fieldT === "number";
}

/**
 * Simulates a protocol (object as in a file, or parsed) on a phantom (object
 * or parsed) in this thread: isochromat options are defaultIsochromatOptions()
 * overridden by `iso`, then raised by the pipeline where coherence pathways
 * need it (unless `opts.exact`). No convergence probe (tests check convergence
 * themselves).
 */
export function runPipeline(
  protocol: Record<string, unknown> | Protocol, phantom: unknown, iso: Partial<IsochromatOptions> = {}, sets: string[] = [],
  opts: { exact?: boolean } = {},
): PipelineResult {
  const prep = prepareSimulation({
    exactSliceCount: opts.exact === true, convergenceCheck: false,
    ...(isParsedProtocol(protocol) ? { parsedProtocol: protocol } : { protocol }),
    ...(isParsedPhantom(phantom) ? { parsedPhantom: phantom } : { phantom }),
    protocolName: "test-protocol.json", phantomName: "test-phantom.json", sets,
    iso: { ...defaultIsochromatOptions(), ...iso },
  });
  const { seq, iso: set } = prep.first;
  // a test phantom that misses the slice would compare zeros with zeros: fail loudly instead
  assert.ok(set.count > 0, "the test phantom puts no isochromat in the slice");
  const { kspace, plan } = simulateSerial(seq, set, { receiverFilter: prep.protocol.receiverFilter });
  let m0 = 0;
  for (let i = 0; i < set.count; i++) m0 += set.m0[i]!;
  const { kspace: kgrid, image } = reconstructRuns([seq], [kspace]);
  const kacq: Volume = { coils: kspace.coils, slice: seq.kspace.slice, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im };
  return { protocol: prep.protocol, phantom: prep.phantom, seq, iso: set, kspace, plan, m0Total: m0, kacq, kgrid, image, mag: magnitude(image) };
}

/** runPipeline with protocol and phantom objects (the core tests' name). */
export function simulate(protocol: Record<string, unknown>, phantom: Record<string, unknown>, iso: Partial<IsochromatOptions> = {}, sets: string[] = []): PipelineResult {
  return runPipeline(protocol, phantom, iso, sets);
}

/** The k-space sample at k = 0 (complex) of a 2D run. */
export function centreSample(r: ReturnType<typeof simulate>): { re: number; im: number; abs: number } {
  const row = r.seq.centre.phase, col = r.seq.centre.read;
  const i = row * r.kspace.read + col;
  const re = r.kspace.re[i]!, im = r.kspace.im[i]!;
  return { re, im, abs: Math.hypot(re, im) };
}

/** Relative L2 error ‖a − b‖/‖b‖ of complex vectors given as re/im parts. */
export function relL2(aRe: ArrayLike<number>, aIm: ArrayLike<number>, bRe: ArrayLike<number>, bIm: ArrayLike<number>): number {
  let num = 0, den = 0;
  for (let i = 0; i < aRe.length; i++) {
    num += (aRe[i]! - bRe[i]!) ** 2 + (aIm[i]! - bIm[i]!) ** 2;
    den += bRe[i]! ** 2 + bIm[i]! ** 2;
  }
  return Math.sqrt(num / den);
}

/** `isofold protocol <args>` in this process (commander with exitOverride): what it printed on stdout. */
export async function protocolInProcess(...args: string[]): Promise<string> {
  const program = new Command();
  program.exitOverride();
  registerProtocol(program);
  let out = "";
  const log = vi.spyOn(console, "log").mockImplementation((...a: unknown[]) => void (out += a.join(" ") + "\n"));
  const write = vi.spyOn(process.stdout, "write").mockImplementation((s: string | Uint8Array) => ((out += String(s)), true));
  try {
    await program.parseAsync(["node", "isofold", "protocol", ...args]);
  } finally {
    log.mockRestore();
    write.mockRestore();
  }
  return out;
}
