/**
 * `isofold protocol <file>`: reads a protocol (file or bundled preset, with
 * --set overrides), builds its sequence without simulating, and prints the
 * normalized protocol and every derived quantity as a table (or --json).
 */
import type { Command } from "commander";
import { SNR_FIELD_EXPONENT } from "../constants.js";
import { UserError } from "../errors.js";
import { logicalAxes, slicePositions, SEQUENCES, type Protocol } from "../protocol/index.js";
import { listPresets, loadProtocol } from "./inputs.js";
import { buildSequence, type Derived, type Sequence } from "../sequence/index.js";
import { collect } from "./options.js";
import { predictProtocolFatShift } from "../analysis/index.js";
import { printWarnings, SAFETY_NOTE } from "./pipeline.js";
import { buildSequenceOf } from "../api.js";

/** What the gradient and slew headroom is, and what it is not. */
export const HEADROOM_NOTE =
  "headroom = 1 − peak demand / the hardware value entered (hardware.gmax, hardware.slew), per logical axis; " +
  "it checks the protocol against those two numbers only and is no nerve-stimulation, SAR or acoustic-noise check";

/** Gradient and slew headroom per logical axis (fractions of the values entered) from the derived peaks. */
export function headroom(p: Protocol, derived: Record<string, Derived>): Record<string, unknown> {
  const axes = ["Read", "Phase", "Slice"] as const;
  const frac = (key: string, limit: number) =>
    Object.fromEntries(axes.map((a) => [a.toLowerCase(), 1 - ((derived[`${key}${a}`]?.value as number | undefined) ?? NaN) / limit]));
  return {
    against: { gmax: p.hardware.gmax, slew: p.hardware.slew, units: "T/m, T/m/s (as entered in the protocol)" },
    gradient: frac("peakGradient", p.hardware.gmax),
    slew: frac("peakSlew", p.hardware.slew),
    units: "fraction of the value entered (0.25 = 25 % left; below 0 = over the limit)",
    note: HEADROOM_NOTE,
  };
}

/** SI unit → display unit and factor. */
const DISPLAY: Record<string, [string, number]> = {
  s: ["ms", 1e3],
  m: ["mm", 1e3],
  "T/m": ["mT/m", 1e3],
  "T·s/m": ["mT·ms/m", 1e6],
  "m^3": ["mm³", 1e9],
  rad: ["deg", 180 / Math.PI],
};

/** Units of the normalized protocol's numeric keys. */
const PROTOCOL_UNITS: Record<string, string> = {
  field: "T", "fov.read": "m", "fov.phase": "m", "slice.thickness": "m", "slice.position": "m", "slice.angle": "rad",
  "slices.gap": "m", pixelBandwidth: "Hz/px", te: "s", tr: "s", flip: "rad", refocusFlip: "rad", "hardware.gmax": "T/m",
  "hardware.slew": "T/m/s", "excitation.duration": "s", "refocusing.duration": "s", rfSpoilIncrement: "rad", echoSpacing: "s",
};

function show(value: number | string, unit: string): string {
  if (typeof value === "string") return value;
  let [u, f] = DISPLAY[unit] ?? [unit, 1];
  if (unit === "s" && Math.abs(value) >= 10) [u, f] = ["s", 1];
  if (unit === "Hz" && Math.abs(value) >= 1e4) [u, f] = ["kHz", 1e-3];
  const v = value * f;
  const txt = Number.isInteger(v) ? String(v) : Number(v.toPrecision(5)).toString();
  return u ? `${txt} ${u}` : txt;
}

function flatten(obj: Record<string, unknown>, prefix = "", out: [string, unknown][] = []): [string, unknown][] {
  for (const [k, v] of Object.entries(obj)) {
    const key = prefix ? `${prefix}.${k}` : k;
    if (v && typeof v === "object" && !Array.isArray(v)) flatten(v as Record<string, unknown>, key, out);
    else out.push([key, v]);
  }
  return out;
}

function table(rows: string[][]): string {
  const w = rows[0]!.map((_, c) => Math.max(...rows.map((r) => (r[c] ?? "").length)));
  return rows.map((r) => r.map((x, c) => (c === r.length - 1 ? x : x.padEnd(w[c]!))).join("  ").trimEnd()).join("\n");
}

/** Derived quantities plus the multi-slice packing, for a protocol and its sequence. */
export function protocolSummary(p: Protocol, seq: Sequence): Record<string, Derived> {
  const d: Record<string, Derived> = { ...seq.derived };
  const ms = slicePositions(p);
  if (p.slices.count > 1) {
    d["slicePositions"] = { value: ms.positions.map((x) => (x * 1e3).toFixed(2)).join(", ") + " mm", unit: "" };
    d["sliceOrder"] = { value: ms.order.map((k) => k + 1).join(", "), unit: "", note: `${p.slices.order}, spatial indices from 1` };
    d["slicesPerTr"] = { value: Math.floor((p.tr + 1e-9) / seq.activeTime), unit: "slices", note: `at ${(seq.activeTime * 1e3).toFixed(2)} ms each` };
  }
  // fat–water shifts: the analysis stage's predictions (the same numbers and formulas as report.json)
  const fx = predictProtocolFatShift(p, seq);
  const fat = `fat ${fx.ppm} ppm (Hamilton et al. 2011), Δf = ${fx.hz.toFixed(1)} Hz`;
  d["fatShiftRead"] = fx.readout.perLinePx !== undefined
    ? { value: fx.readout.px, unit: "px", note: `${fx.readout.note}; here ±${Math.abs(fx.readout.perLinePx).toFixed(3)} px per line; ${fat}` }
    : { value: fx.readout.px, unit: "px", note: `${fx.readout.note}; toward ${fx.readout.direction}; ${fat}` };
  d["fatShiftSlice"] = { value: fx.slice.m, unit: "m", note: `${fx.slice.note}; toward ${fx.slice.direction}; ${fat}` };
  if (fx.slice.refocusedM !== undefined) d["fatShiftSliceRefocused"] = { value: fx.slice.refocusedM, unit: "m", note: `refocused slab: Δz = −Δf/(γ̄·G_refocusing); toward ${fx.slice.refocusedDirection}; ${fat}` };
  if (fx.phase.px !== 0) d["fatShiftPhase"] = { value: fx.phase.px, unit: "px", note: `${fx.phase.note}; toward ${fx.phase.direction}; ${fat}` };
  d["activeTime"] = { value: seq.activeTime, unit: "s", note: "per TR per slice: excitation to the end of the last gradient" };
  return d;
}

export function registerProtocol(program: Command): void {
  program
    .command("protocol")
    .description("print a protocol normalized to SI, with every quantity derived from it (timing, k-space, gradients and their headroom against the hardware values entered, SNR); no simulation")
    .argument("<file>", `protocol file (JSON) or bundled preset name (${listPresets().join(", ")})`)
    .option("-s, --set <key=value>", 'override a protocol value, repeatable, e.g. --set te="8 ms"', collect, [])
    .option("--json", "print JSON (SI values) instead of the table")
    .option("--reference <file>", "also state the SNR relative to this protocol (file or preset), ∝ voxel·√(N_avg·N_lines·N_slice·T_adc), N_slice = slice-encoding steps")
    .action((file: string, o: { set: string[]; json?: boolean; reference?: string }) => {
      const p = loadProtocol(file, o.set);
      const seq = buildSequenceOf(p, file);
      const ms = slicePositions(p);
      if (p.slices.count > 1 && p.slices.count * seq.activeTime > p.tr + 1e-9) {
        throw new UserError(
          `${p.slices.count} slices of ${(seq.activeTime * 1e3).toFixed(2)} ms each do not fit in tr ${(p.tr * 1e3).toFixed(2)} ms; ` +
            `set tr to at least ${(Math.ceil(p.slices.count * seq.activeTime * 1e5) / 1e2).toFixed(2)} ms or slices.count to at most ${Math.floor(p.tr / seq.activeTime)}`,
          file, "slices.count",
        );
      }
      const derived = protocolSummary(p, seq);
      if (o.reference) {
        const ref = loadProtocol(o.reference);
        let rseq: Sequence;
        try {
          rseq = buildSequence(ref);
        } catch (e) {
          if (e instanceof UserError) throw e.inFile(o.reference);
          throw e;
        }
        // a reference at another field: SNR ∝ B0^β as well (Hoult and Richards 1976; as the dataset's physical noise model)
        const fieldFactor = ref.field !== p.field ? (p.field / ref.field) ** SNR_FIELD_EXPONENT : 1;
        derived["snrVsReference"] = {
          value: ((seq.derived["relativeSnr"]!.value as number) / (rseq.derived["relativeSnr"]!.value as number)) * fieldFactor,
          unit: "",
          note: `SNR relative to ${o.reference}` +
            (fieldFactor !== 1 ? `, including (B0/B0_ref)^${SNR_FIELD_EXPONENT} = ${fieldFactor.toPrecision(3)} for ${p.field} T against ${ref.field} T (sample-noise regime, Hoult and Richards 1976)` : "") +
            ` (same tissue and contrast assumed)`,
        };
      }
      const axes = logicalAxes(p);
      printWarnings(p.warnings);
      if (o.json) {
        process.stdout.write(JSON.stringify({
          safety: SAFETY_NOTE,
          protocol: p, sequence: seq.name, timing: seq.timing, derived, headroom: headroom(p, derived), warnings: p.warnings, phaseTable: seq.phaseTable,
          geometry: { read: axes.read, phase: axes.phase, slice: axes.slice, slicePositions: ms.positions, sliceOrder: ms.order },
        }, null, 2) + "\n");
        return;
      }
      const rows: string[][] = [["protocol", "value", ""]];
      // warnings are not a protocol value: none, no row; otherwise one row each (also on stderr, as every command prints them)
      const { warnings, ...values } = p;
      for (const [k, v] of flatten(values as unknown as Record<string, unknown>)) {
        const unit = PROTOCOL_UNITS[k];
        rows.push([k, typeof v === "number" && unit ? show(v, unit) : String(v), ""]);
      }
      for (const w of new Set(warnings)) rows.push(["warning", w, ""]);
      const drows: string[][] = [["derived", "value", "note"]];
      for (const [k, d] of Object.entries(derived)) drows.push([k, show(d.value, d.unit), d.note ?? ""]);
      console.log(`${seq.name} (${SEQUENCES[p.sequence]})`);
      console.log(SAFETY_NOTE);
      console.log(`axes: read ${axes.names.read}, phase ${axes.names.phase}, slice ${axes.names.slice}` +
        (axes.angle ? `, tilted ${((axes.angle * 180) / Math.PI).toFixed(2)} deg about ${axes.tiltAxis}` : ""));
      console.log("");
      console.log(table(rows));
      console.log("");
      console.log(table(drows));
      console.log("");
      console.log(`gradient and slew ${HEADROOM_NOTE}`);
    });
}
