/**
 * `isofold validate`: runs the closed-form checks of src/check/validate.ts on
 * small cases and prints check, published source, expected, measured,
 * tolerance and pass/fail; exit 1 if any fails. Wiring only: the simulation
 * goes through the library's prepareSimulation and reconstructRuns with the serial engine.
 */
import type { Command } from "commander";
import { runValidation, type SimOutput, type ValidationRow } from "../check/validate.js";
import { simulateSerial } from "../engine/index.js";
import { defaultIsochromatOptions, type IsochromatOptions } from "../isochromats/index.js";
import type { Phantom } from "../phantom/index.js";
import type { Protocol } from "../protocol/index.js";
import { magnitude } from "../recon/reconstruct.js";
import { prepareSimulation, reconstructRuns } from "../api.js";
import { SAFETY_NOTE } from "./pipeline.js";

/** Protocol + phantom → image, as a run does it (through-slice count from the pathway moments, the run's sampled extent), one slice. */
export function simulateSmall(p: Protocol, ph: Phantom, iso: Partial<IsochromatOptions>): SimOutput {
  const prep = prepareSimulation({ parsedProtocol: p, parsedPhantom: ph, iso: { ...defaultIsochromatOptions(), ...iso }, convergenceCheck: false });
  const { seq, iso: set } = prep.first;
  const { kspace } = simulateSerial(seq, set, { receiverFilter: p.receiverFilter });
  const kacq = { slice: seq.kspace.slice, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im };
  const { image } = reconstructRuns([seq], [kspace]);
  return { seq, iso: set, kacq, image, mag: magnitude(image) };
}

const num = (v: number) => (!Number.isFinite(v) ? "—" : Math.abs(v) >= 100 ? v.toFixed(1) : Math.abs(v) >= 1 ? v.toFixed(3) : v.toPrecision(3));

/** Greedy word wrap of `text` to lines of at most `width` characters (a longer word stays whole). */
function wrap(text: string, width: number): string[] {
  const lines: string[] = [];
  let line = "";
  for (const word of text.split(/\s+/).filter(Boolean)) {
    if (line && line.length + 1 + word.length > width) {
      lines.push(line);
      line = word;
    } else line = line ? `${line} ${word}` : word;
  }
  if (line) lines.push(line);
  return lines.length ? lines : [""];
}

/**
 * The validation table for a terminal `width` characters wide (default: the
 * terminal's, else 100): result, expected, measured, tolerance and unit in fixed
 * columns, the check's name and its published source wrapped beside them.
 */
export function validationTable(rows: ValidationRow[], width = process.stdout.columns || 100): string {
  const cells = rows.map((r) => [r.pass ? "pass" : "FAIL", num(r.expected), num(r.measured), `± ${num(r.tolerance)}`, r.unit]);
  const head = ["result", "expected", "measured", "tolerance", "unit"];
  const w = head.map((h, c) => Math.max(h.length, ...cells.map((r) => r[c]!.length)));
  const lead = w.reduce((a, b) => a + b + 2, 0);
  const textWidth = Math.max(30, width - lead);
  const pad = (r: string[]) => r.map((x, c) => x.padEnd(w[c]!)).join("  ") + "  ";
  const out = [(pad(head) + "check (published source)").trimEnd()];
  rows.forEach((r, i) => {
    const text = [...wrap(r.check, textWidth), ...wrap(`source: ${r.source}`, textWidth)];
    text.forEach((t, j) => out.push((j === 0 ? pad(cells[i]!) : " ".repeat(lead)) + t));
  });
  return out.join("\n");
}

export function registerValidate(program: Command): void {
  program
    .command("validate")
    .description("run isofold's closed-form checks (Ernst equation, spin echo, disc jinc, fat shift, wrap, EPI shift, bSSFP, RF) on small cases on this machine; exit 1 if any fails")
    .option("--json", "print JSON instead of the table")
    .action((o: { json?: boolean }) => {
      const t0 = Date.now();
      const rows = runValidation(simulateSmall);
      const failed = rows.filter((r) => !r.pass).length;
      const seconds = (Date.now() - t0) / 1000;
      if (o.json) {
        process.stdout.write(JSON.stringify({ checks: rows, passed: rows.length - failed, failed, seconds, safety: SAFETY_NOTE }, null, 2) + "\n");
      } else {
        console.log(validationTable(rows));
        console.log("");
        console.log(`${rows.length - failed} of ${rows.length} checks pass in ${seconds.toFixed(1)} s${failed ? `; ${failed} FAILED: this build does not reproduce the closed forms above` : ""}`);
        console.log(SAFETY_NOTE);
      }
      if (failed) process.exitCode = 1;
    });
}
