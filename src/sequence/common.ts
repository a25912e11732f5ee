/**
 * Pieces every Cartesian sequence shares: the readout, the phase-encode table,
 * slice selection, and the report of derived quantities. Relations from
 * Bernstein, King & Zhou 2004 (Handbook of MRI Pulse Sequences, ch. 11):
 * dwell Δt = 1/BW, G_read = BW/(γ̄·FOV), FOV = 1/Δk, ΔA_pe = 1/(γ̄·FOV).
 */
import { GAMMA_BAR } from "../constants.js";
import { UserError } from "../errors.js";
import type { Protocol } from "../protocol/types.js";
import { makePulse } from "./rf.js";
import { minTrapezoid, rampTime, type Trapezoid } from "./trapezoid.js";
import type { Block, Derived, RFWaveform, Vec3 } from "./types.js";

export interface ReadoutPlan {
  /** Acquired samples (read matrix × oversampling). */
  samples: number;
  /** Dwell time (s) = 1/(total acquired bandwidth). */
  dwell: number;
  /** Readout plateau amplitude (T/m). */
  gradient: number;
  /** Ramp time of the readout lobe (s). */
  ramp: number;
  /** Index of the sample at k = 0. */
  echoSample: number;
  /** Area from the start of the ramp-up to the echo sample (T·s/m); the prephaser cancels it. */
  areaToEcho: number;
  /** Plateau duration = samples·dwell (s). */
  flat: number;
}

export function readoutPlan(p: Protocol): ReadoutPlan {
  const samples = Math.round(p.matrix.read * p.oversampling.read);
  const bwTotal = p.pixelBandwidth * p.matrix.read * p.oversampling.read; // Hz, sampled bandwidth
  const dwell = 1 / bwTotal;
  const fovAcq = p.fov.read * p.oversampling.read;
  const gradient = bwTotal / (GAMMA_BAR * fovAcq);
  if (gradient > p.hardware.gmax) {
    const maxBw = (p.hardware.gmax * GAMMA_BAR * p.fov.read) / p.matrix.read;
    throw new UserError(
      `readout gradient ${(gradient * 1e3).toFixed(2)} mT/m exceeds gmax ${(p.hardware.gmax * 1e3).toFixed(1)} mT/m; ` +
        `lower the bandwidth to at most ${maxBw.toFixed(0)} Hz/px or enlarge fov.read`,
      undefined,
      "bandwidth",
    );
  }
  const ramp = rampTime(gradient, p.hardware.slew);
  const echoSample = Math.floor(samples / 2);
  const areaToEcho = gradient * (ramp / 2 + echoSample * dwell);
  return { samples, dwell, gradient, ramp, echoSample, areaToEcho, flat: samples * dwell };
}

export interface PhasePlan {
  /** Acquired phase lines (matrix × (1 + oversampling), same parity as the matrix). */
  lines: number;
  /** Index of the line at k = 0. */
  centre: number;
  /** Area step between lines (T·s/m). */
  step: number;
  /** Acquisition order: order[i] = line index acquired in the i-th TR. */
  order: Int32Array;
}

export function phasePlan(p: Protocol): PhasePlan {
  let lines = Math.round(p.matrix.phase * (1 + p.oversampling.phase));
  if ((lines - p.matrix.phase) % 2 !== 0) lines += 1;
  const fovAcq = (p.fov.phase * lines) / p.matrix.phase;
  const step = 1 / (GAMMA_BAR * fovAcq);
  const centre = Math.floor(lines / 2);
  const order = new Int32Array(lines);
  if (p.phaseOrder === "linear") {
    for (let i = 0; i < lines; i++) order[i] = i;
  } else {
    // centre-out: c, c+1, c−1, c+2, c−2, …
    let i = 0;
    order[i++] = centre;
    for (let d = 1; i < lines; d++) {
      if (centre + d < lines) order[i++] = centre + d;
      if (i < lines && centre - d >= 0) order[i++] = centre - d;
    }
  }
  return { lines, centre, step, order };
}

export interface SliceSelect {
  pulse: RFWaveform;
  /** Ramp of the slice-select gradient (s). */
  ramp: number;
  /** Area from the pulse centre to the end of the ramp-down (T·s/m). */
  areaAfterCentre: number;
}

export function sliceSelect(p: Protocol, id: number, name: string, spec: Protocol["excitation"], flip: number): SliceSelect {
  const pulse = makePulse(id, name, spec, flip, p.slice.thickness, p.slice.position);
  if (Math.abs(pulse.gradient) > p.hardware.gmax) {
    const minThk = (spec.tbw / spec.duration / GAMMA_BAR / p.hardware.gmax) * 1e3;
    throw new UserError(
      `slice-select gradient ${(pulse.gradient * 1e3).toFixed(2)} mT/m for the ${name} pulse exceeds gmax; ` +
        `use a slice of at least ${minThk.toFixed(2)} mm or a longer pulse`,
      undefined,
      "slice.thickness",
    );
  }
  const ramp = rampTime(pulse.gradient, p.hardware.slew);
  return { pulse, ramp, areaAfterCentre: pulse.gradient * (pulse.duration - pulse.centre + ramp / 2) };
}

/** Blocks playing a slice-selective pulse: ramp-up, pulse, ramp-down. */
export function pushPulse(blocks: Block[], ss: SliceSelect, phase: number): void {
  const g = ss.pulse.gradient;
  if (ss.ramp > 0) blocks.push({ kind: "free", duration: ss.ramp, area: [0, 0, (g * ss.ramp) / 2] });
  blocks.push({ kind: "rf", pulse: ss.pulse.id, phase });
  if (ss.ramp > 0) blocks.push({ kind: "free", duration: ss.ramp, area: [0, 0, (g * ss.ramp) / 2] });
}

/** Concurrent lobes on the three axes, as one free block lasting the longest lobe. */
export function lobes(area: Vec3, p: Protocol): { duration: number; trap: Trapezoid[] } {
  const trap = area.map((a) => minTrapezoid(a, p.hardware.gmax, p.hardware.slew));
  return { duration: Math.max(...trap.map((t) => t.duration)), trap };
}

/** Ramp-up, ADC, ramp-down of the readout. */
export function pushReadout(blocks: Block[], ro: ReadoutPlan, row: number, phase: number, weight: number): void {
  const g = ro.gradient;
  if (ro.ramp > 0) blocks.push({ kind: "free", duration: ro.ramp, area: [(g * ro.ramp) / 2, 0, 0] });
  blocks.push({ kind: "adc", samples: ro.samples, dwell: ro.dwell, grad: [g, 0, 0], row, phase, weight });
  if (ro.ramp > 0) blocks.push({ kind: "free", duration: ro.ramp, area: [(g * ro.ramp) / 2, 0, 0] });
}

/** RF spoiling phase of the n-th excitation: φ_n = increment·n(n+1)/2 (Zur, Wood & Neuringer 1991, MRM 21:251). */
export function rfSpoilPhase(n: number, increment: number): number {
  return (increment * n * (n + 1)) / 2;
}

/** Time-check helper: throws the one-line error naming the key and the minimum. */
export function requireAtLeast(key: "te" | "tr", value: number, minimum: number): void {
  if (value < minimum - 1e-9) {
    throw new UserError(
      `${(value * 1e3).toFixed(3)} ms is below the minimum ${(Math.ceil(minimum * 1e5) / 1e2).toFixed(2)} ms these gradients and pulses allow; ` +
        `set ${key} to at least ${(Math.ceil(minimum * 1e5) / 1e2).toFixed(2)} ms (or raise the bandwidth / shorten the pulses)`,
      undefined,
      key,
    );
  }
}

/** Derived quantities every Cartesian sequence reports. */
export function commonDerived(p: Protocol, ro: ReadoutPlan, pe: PhasePlan, exc: SliceSelect): Record<string, Derived> {
  const dkRead = 1 / p.fov.read;
  const dkPhase = 1 / p.fov.phase;
  const bwTotal = p.pixelBandwidth * p.matrix.read;
  const fatHz = 3.4e-6 * GAMMA_BAR * p.field;
  const voxel = (p.fov.read / p.matrix.read) * (p.fov.phase / p.matrix.phase) * p.slice.thickness;
  return {
    dwell: { value: ro.dwell, unit: "s", note: "time between acquired readout samples (1/sampled bandwidth)" },
    readoutDuration: { value: ro.flat, unit: "s", note: "ADC window = 1/pixel bandwidth" },
    pixelBandwidth: { value: p.pixelBandwidth, unit: "Hz/px" },
    totalBandwidth: { value: bwTotal, unit: "Hz", note: "matrix.read × pixel bandwidth" },
    halfBandwidth: { value: bwTotal / 2, unit: "Hz", note: "± half of the total bandwidth" },
    fatShiftRead: { value: fatHz / p.pixelBandwidth, unit: "px", note: "fat–water shift along read at 3.4 ppm (Hamilton et al. 2011)" },
    readGradient: { value: ro.gradient, unit: "T/m", note: "G = BW/(γ̄·FOV)" },
    readRamp: { value: ro.ramp, unit: "s" },
    deltaKRead: { value: dkRead, unit: "1/m", note: "Δk = 1/FOV" },
    kMaxRead: { value: (p.matrix.read * dkRead) / 2, unit: "1/m", note: "k_max = N·Δk/2 = 1/(2Δx)" },
    deltaKPhase: { value: dkPhase, unit: "1/m" },
    kMaxPhase: { value: (p.matrix.phase * dkPhase) / 2, unit: "1/m" },
    phaseStepArea: { value: pe.step, unit: "T·s/m", note: "ΔA = 1/(γ̄·FOV_phase,acquired)" },
    phaseLines: { value: pe.lines, unit: "lines", note: "acquired, with phase oversampling" },
    readSamples: { value: ro.samples, unit: "samples", note: "acquired, with read oversampling" },
    sliceGradient: { value: exc.pulse.gradient, unit: "T/m" },
    rfBandwidth: { value: exc.pulse.gradient * GAMMA_BAR * p.slice.thickness, unit: "Hz" },
    fatShiftSlice: {
      value: exc.pulse.gradient > 0 ? fatHz / (GAMMA_BAR * exc.pulse.gradient) : 0,
      unit: "m",
      note: "Δz = Δf/(γ̄·G_slice), fat at 3.4 ppm",
    },
    voxelVolume: { value: voxel, unit: "m^3" },
    relativeSnr: {
      value: (voxel / (1e-3 * 1e-3 * 5e-3)) * Math.sqrt((p.averages * p.matrix.phase * p.matrix.read) / bwTotal) / Math.sqrt((256 * 256) / (256 * 250)),
      unit: "",
      note: "∝ voxel volume·√(N_avg·N_phase·N_read/BW) (Edelstein et al. 1986), relative to 1×1×5 mm, 256×256, 250 Hz/px, 1 average",
    },
  };
}
