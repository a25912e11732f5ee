/** Shared test helpers: temporary input files and a small in-process simulation. */
import assert from "node:assert/strict";
import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { prepare } from "../src/cli/pipeline.js";
import { simulateSerial } from "../src/engine/index.js";
import { defaultIsochromatOptions, type IsochromatOptions } from "../src/isochromats/index.js";

export function tempDir(prefix = "isofold-test-"): string {
  return mkdtempSync(join(tmpdir(), prefix));
}

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

/** Runs protocol + phantom objects through prepare() and the serial engine. */
export function simulate(protocol: Record<string, unknown>, phantom: Record<string, unknown>, iso: Partial<IsochromatOptions> = {}, sets: string[] = []) {
  const dir = tempDir();
  const pFile = writeJson(dir, "protocol.json", protocol);
  const phFile = writeJson(dir, "phantom.json", phantom);
  const prep = prepare({
    phantom: phFile, protocol: pFile, sets, out: join(dir, "out"), seed: 1,
    iso: { ...defaultIsochromatOptions(), ...iso },
  });
  // a test phantom that misses the slice would compare zeros with zeros: fail loudly instead
  assert.ok(prep.iso.count > 0, "the test phantom puts no isochromat in the slice");
  const { kspace, plan } = simulateSerial(prep.seq, prep.iso, { receiverFilter: prep.protocol.receiverFilter });
  let m0 = 0;
  for (let i = 0; i < prep.iso.count; i++) m0 += prep.iso.m0[i]!;
  return { ...prep, kspace, plan, m0Total: m0, dir };
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
