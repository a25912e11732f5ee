/**
 * Pieces every Cartesian sequence shares: the readout, the phase-encode table,
 * slice selection, hardware demand and the report of derived quantities.
 * Relations from Bernstein, King & Zhou 2004 (Handbook of MRI Pulse Sequences, ch. 11):
 * dwell Δt = 1/BW, G_read = BW/(γ̄·FOV), FOV = 1/Δk, ΔA_pe = 1/(γ̄·FOV).
 *
 * k-space grid convention (recon/fft.ts): along an axis of N points, index m
 * holds k = (m − ⌊N/2⌋)·Δk. A readout of polarity +1 visits the columns in
 * increasing order in time; polarity −1 in decreasing order (its samples are
 * stored in time order and the recon reverses the row, see Sequence.grid).
 */
import { GAMMA_BAR } from "../constants.js";
import { UserError } from "../errors.js";
import type { Protocol, PulseSpec } from "../protocol/types.js";
import { logicalAxes } from "../protocol/geometry.js";
import { makePulse } from "./rf.js";
import { minTrapezoid, rampTime, type Trapezoid } from "./trapezoid.js";
import type { Block, Derived, RFWaveform, Vec3 } from "./types.js";

/** Peak gradient amplitude and slew demanded on each logical axis [read, phase, slice]. */
export class Demand {
  gradient: Vec3 = [0, 0, 0];
  slew: Vec3 = [0, 0, 0];
  /** Records a lobe of amplitude g (T/m) reached in `ramp` seconds on `axis`. */
  add(axis: number, g: number, ramp: number): void {
    const a = Math.abs(g);
    if (a > this.gradient[axis]!) this.gradient[axis] = a;
    if (ramp > 0 && a / ramp > this.slew[axis]!) this.slew[axis] = a / ramp;
  }
  addTraps(traps: Trapezoid[]): void {
    traps.forEach((t, axis) => this.add(axis, t.amplitude, t.ramp));
  }
}

export interface ReadoutPlan {
  /** Readout gradient polarity (+1 or −1). */
  polarity: 1 | -1;
  /** Columns of the full k-space grid (read matrix × oversampling). */
  full: number;
  /** Grid column of k = 0: ⌊full/2⌋. */
  centreColumn: number;
  /** First grid column acquired (asymmetric echo skips the columns below it). */
  offset: number;
  /** Acquired samples per line. */
  samples: number;
  /** Dwell time (s) = 1/(sampled bandwidth). */
  dwell: number;
  /** Signed readout plateau amplitude (T/m). */
  gradient: number;
  /** Ramp time of the readout lobe (s). */
  ramp: number;
  /** Plateau time before the first sample (s): 0, or one dwell so a line is symmetric for back-and-forth (EPI) readouts. */
  preFlat: number;
  /** Index (time order) of the sample at k = 0. */
  echoSample: number;
  /** Signed read area of the prephaser that puts k = 0 at the echo sample (T·s/m). */
  prephaser: number;
  /** Signed area of the whole lobe: ramps, plateau (T·s/m). */
  lobeArea: number;
  /** Lobe duration: ramp + preFlat + samples·dwell + ramp (s). */
  duration: number;
  /** Time from the start of the lobe to the k = 0 sample, and from it to the lobe end (s). */
  toEcho: number;
  afterEcho: number;
  /** ADC window samples·dwell (s). */
  flat: number;
}

/**
 * Readout lobe. The sampled bandwidth is BW = pixelBandwidth·N_read·os and the
 * plateau G = BW/(γ̄·FOV_read·os) (Bernstein et al. 2004, eq. for the readout
 * gradient); Δk per sample = γ̄·G·Δt = 1/(FOV·os).
 */
export function readoutPlan(p: Protocol, opts: { polarity?: 1 | -1; symmetric?: boolean } = {}): ReadoutPlan {
  const polarity = opts.polarity ?? p.readoutPolarity;
  const full = Math.round(p.matrix.read * p.oversampling.read);
  const bwTotal = p.pixelBandwidth * p.matrix.read * p.oversampling.read;
  const dwell = 1 / bwTotal;
  const fovAcq = p.fov.read * p.oversampling.read;
  const g = bwTotal / (GAMMA_BAR * fovAcq);
  if (g > p.hardware.gmax) {
    const maxBw = (p.hardware.gmax * GAMMA_BAR * p.fov.read) / p.matrix.read;
    const minFov = (p.pixelBandwidth * p.matrix.read) / (GAMMA_BAR * p.hardware.gmax);
    throw new UserError(
      `readout gradient ${(g * 1e3).toFixed(2)} mT/m exceeds hardware.gmax ${(p.hardware.gmax * 1e3).toFixed(1)} mT/m; ` +
        `lower the bandwidth to at most ${Math.floor(maxBw)} Hz/px or enlarge fov.read to at least ${(minFov * 100).toFixed(2)} cm`,
      undefined,
      "bandwidth",
    );
  }
  const centreColumn = Math.floor(full / 2);
  const offset = Math.min(Math.round((1 - p.partialFourier.read) * full), Math.max(0, centreColumn - 2));
  const samples = full - offset;
  const ramp = rampTime(g, p.hardware.slew);
  const preFlat = opts.symmetric ? dwell : 0;
  const gs = polarity * g;
  const da = g * dwell; // |area| per sample
  const echoSample = polarity > 0 ? centreColumn - offset : offset + samples - 1 - centreColumn;
  const areaAtFirst = polarity > 0 ? (offset - centreColumn) * da : (offset + samples - 1 - centreColumn) * da;
  const prephaser = areaAtFirst - gs * (ramp / 2 + preFlat);
  const flat = samples * dwell;
  const toEcho = ramp + preFlat + echoSample * dwell;
  const duration = 2 * ramp + preFlat + flat;
  return {
    polarity, full, centreColumn, offset, samples, dwell, gradient: gs, ramp, preFlat, echoSample, prephaser,
    lobeArea: gs * (ramp + preFlat + flat), duration, toEcho, afterEcho: duration - toEcho, flat,
  };
}

/** Ramp-up, (pre-plateau), ADC, ramp-down of the readout, writing row `row`. */
export function pushReadout(blocks: Block[], ro: ReadoutPlan, row: number, phase: number, weight: number): void {
  const g = ro.gradient;
  if (ro.ramp > 0) blocks.push({ kind: "free", duration: ro.ramp, area: [(g * ro.ramp) / 2, 0, 0] });
  if (ro.preFlat > 0) blocks.push({ kind: "free", duration: ro.preFlat, area: [g * ro.preFlat, 0, 0] });
  blocks.push({ kind: "adc", samples: ro.samples, dwell: ro.dwell, grad: [g, 0, 0], row, phase, weight });
  if (ro.ramp > 0) blocks.push({ kind: "free", duration: ro.ramp, area: [(g * ro.ramp) / 2, 0, 0] });
}

/** The readout lobe played without sampling (dummy TRs): same duration and area. */
export function pushReadoutSilent(blocks: Block[], ro: ReadoutPlan): void {
  blocks.push({ kind: "free", duration: ro.duration, area: [ro.lobeArea, 0, 0] });
}

export interface PhasePlan {
  /** Phase lines of the full grid (matrix × (1 + oversampling), same parity as the matrix). */
  lines: number;
  /** Index of the line at k = 0. */
  centre: number;
  /** Area step between lines (T·s/m). */
  step: number;
  /** First acquired line (partial Fourier skips lines 0 … first−1, the most negative k). */
  first: number;
  /** Acquired lines. */
  acquired: number;
  /** Acquisition order: order[i] = line index acquired in the i-th TR. */
  order: Int32Array;
}

/** Phase-encode table: ΔA = 1/(γ̄·FOV_phase,acquired) (Bernstein et al. 2004), lines ordered linear or centre-out. */
export function phasePlan(p: Protocol): PhasePlan {
  let lines = Math.round(p.matrix.phase * (1 + p.oversampling.phase));
  if ((lines - p.matrix.phase) % 2 !== 0) lines += 1;
  const fovAcq = (p.fov.phase * lines) / p.matrix.phase;
  const step = 1 / (GAMMA_BAR * fovAcq);
  const centre = Math.floor(lines / 2);
  const first = p.partialFourier.phase < 1 ? Math.min(lines - Math.ceil(p.partialFourier.phase * lines), Math.max(0, centre - 2)) : 0;
  const acquired = lines - first;
  const order = new Int32Array(acquired);
  if (p.phaseOrder === "linear") {
    for (let i = 0; i < acquired; i++) order[i] = first + i;
  } else {
    // centre-out: c, c+1, c−1, c+2, c−2, …
    let i = 0;
    order[i++] = centre;
    for (let d = 1; i < acquired; d++) {
      if (centre + d < lines) order[i++] = centre + d;
      if (i < acquired && centre - d >= first) order[i++] = centre - d;
    }
  }
  return { lines, centre, step, first, acquired, order };
}

/** Largest |area| of any phase-encode lobe (T·s/m). */
export function maxPhaseArea(pe: PhasePlan): number {
  return Math.max(pe.centre - pe.first, pe.lines - 1 - pe.centre) * pe.step;
}

export interface SliceSelect {
  pulse: RFWaveform;
  /** Ramp of the slice-select gradient (s). */
  ramp: number;
  /** Area from the pulse centre to the end of the ramp-down (T·s/m). */
  areaAfterCentre: number;
  /** Area from the start of the ramp-up to the pulse centre (T·s/m). */
  areaBeforeCentre: number;
  /** Ramp + pulse + ramp (s). */
  duration: number;
  /** Time from the start of the ramp-up to the pulse centre, and from the centre to the end of the ramp-down (s). */
  toCentre: number;
  afterCentre: number;
}

/**
 * Slice- (or slab-) selective pulse: G = (TBW/τ)/(γ̄·Δz) (Bernstein et al. 2004, ch. 2).
 * A hard pulse is non-selective (no gradient).
 */
export function sliceSelect(
  p: Protocol, id: number, name: string, spec: PulseSpec, flip: number,
  thickness = p.slice.thickness, position = p.slice.position, demand?: Demand,
): SliceSelect {
  const pulse = makePulse(id, name, spec, flip, thickness, position);
  if (Math.abs(pulse.gradient) > p.hardware.gmax) {
    const minThk = (spec.tbw / spec.duration / GAMMA_BAR / p.hardware.gmax) * 1e3;
    const minDur = (spec.tbw / (GAMMA_BAR * p.hardware.gmax * thickness)) * 1e3;
    throw new UserError(
      `slice-select gradient ${(pulse.gradient * 1e3).toFixed(2)} mT/m for the ${name} pulse exceeds hardware.gmax; ` +
        `use a ${thickness === p.slice.thickness ? "slice" : "slab"} of at least ${minThk.toFixed(2)} mm or a pulse of at least ${minDur.toFixed(3)} ms`,
      undefined,
      "slice.thickness",
    );
  }
  const ramp = rampTime(pulse.gradient, p.hardware.slew);
  demand?.add(2, pulse.gradient, ramp);
  const g = pulse.gradient;
  return {
    pulse, ramp,
    areaAfterCentre: g * (pulse.duration - pulse.centre + ramp / 2),
    areaBeforeCentre: g * (pulse.centre + ramp / 2),
    duration: 2 * ramp + pulse.duration,
    toCentre: ramp + pulse.centre,
    afterCentre: pulse.duration - pulse.centre + ramp,
  };
}

/** Blocks playing a slice-selective pulse: ramp-up, pulse, ramp-down. */
export function pushPulse(blocks: Block[], ss: SliceSelect, phase: number): void {
  const g = ss.pulse.gradient;
  if (ss.ramp > 0) blocks.push({ kind: "free", duration: ss.ramp, area: [0, 0, (g * ss.ramp) / 2] });
  blocks.push({ kind: "rf", pulse: ss.pulse.id, phase });
  if (ss.ramp > 0) blocks.push({ kind: "free", duration: ss.ramp, area: [0, 0, (g * ss.ramp) / 2] });
}

/** Concurrent lobes on the three axes, as one free block lasting the longest lobe. */
export function lobes(area: Vec3, p: Protocol, demand?: Demand): { duration: number; trap: Trapezoid[] } {
  const trap = area.map((a) => minTrapezoid(a, p.hardware.gmax, p.hardware.slew));
  demand?.addTraps(trap);
  return { duration: Math.max(...trap.map((t) => t.duration)), trap };
}

/** RF spoiling phase of the n-th excitation: φ_n = increment·n(n+1)/2 (Zur, Wood & Neuringer 1991, MRM 21:251). */
export function rfSpoilPhase(n: number, increment: number): number {
  return (increment * n * (n + 1)) / 2;
}

function msUp(t: number): string {
  return (Math.ceil(t * 1e5 - 1e-6) / 1e2).toFixed(2);
}

/** Time-check helper: throws the one-line error naming the key and the minimum. */
export function requireAtLeast(key: string, value: number, minimum: number, why = "these gradients and pulses allow"): void {
  if (value < minimum - 1e-9) {
    throw new UserError(
      `${(value * 1e3).toFixed(3)} ms is below the minimum ${msUp(minimum)} ms ${why}; ` +
        `set ${key} to at least ${msUp(minimum)} ms (or raise the bandwidth / shorten the pulses)`,
      undefined,
      key,
    );
  }
}

/**
 * Relative SNR ∝ voxel volume · √(N_avg · N_lines · N_slice-encoding · T_adc)
 * (Edelstein et al. 1986, MRM 3:604; with T_adc = N_read/BW per line), with
 * the counts actually acquired. Reference: 1 × 1 × 5 mm voxel, 256 lines of
 * 4 ms (256 samples at 250 Hz/px), one average, 2D.
 */
export function relativeSnr(voxel: number, averages: number, lines: number, sliceSteps: number, tAdc: number): number {
  const ref = 1e-3 * 1e-3 * 5e-3 * Math.sqrt(256 * 4e-3);
  return (voxel * Math.sqrt(averages * lines * sliceSteps * tAdc)) / ref;
}
export const SNR_REFERENCE = "2D, 1×1×5 mm voxel, 256 phase lines, 256 read samples at 250 Hz/px (4 ms per line), 1 average";

/** Derived quantities every Cartesian sequence reports. */
export function commonDerived(
  p: Protocol, ro: ReadoutPlan, pe: PhasePlan, exc: SliceSelect, demand: Demand, sliceSteps = 1,
): Record<string, Derived> {
  const dkRead = 1 / p.fov.read;
  // the phase lines are 1/FOV_acq apart (phase oversampling widens the acquired FOV: pe.lines lines over it)
  const dkPhase = p.matrix.phase / (p.fov.phase * pe.lines);
  const bwTotal = p.pixelBandwidth * p.matrix.read;
  const voxel = (p.fov.read / p.matrix.read) * (p.fov.phase / p.matrix.phase) * p.slice.thickness;
  const d: Record<string, Derived> = {
    pixelBandwidth: { value: p.pixelBandwidth, unit: "Hz/px", note: `as given: ${p.bandwidthAsGiven}` },
    totalBandwidth: { value: bwTotal, unit: "Hz", note: "matrix.read × pixel bandwidth" },
    halfBandwidth: { value: bwTotal / 2, unit: "Hz", note: "± half of the total bandwidth" },
    sampledBandwidth: { value: 1 / ro.dwell, unit: "Hz", note: "1/dwell, with read oversampling" },
    dwell: { value: ro.dwell, unit: "s", note: "time between acquired readout samples (1/sampled bandwidth)" },
    readoutDuration: { value: ro.flat, unit: "s", note: "ADC window (= 1/pixel bandwidth without asymmetric echo)" },
    readGradient: { value: ro.gradient, unit: "T/m", note: "G = BW/(γ̄·FOV), signed by the readout polarity" },
    readRamp: { value: ro.ramp, unit: "s" },
    readLobeDuration: { value: ro.duration, unit: "s", note: "ramp + plateau + ramp" },
    readPrephaserArea: { value: ro.prephaser, unit: "T·s/m" },
    deltaKRead: { value: dkRead, unit: "1/m", note: "Δk = 1/FOV" },
    kMaxRead: { value: (p.matrix.read * dkRead) / 2, unit: "1/m", note: "k_max = N·Δk/2 = 1/(2Δx)" },
    deltaKPhase: { value: dkPhase, unit: "1/m", note: "Δk = 1/FOV_phase,acquired (the phase-encode step; phase oversampling included)" },
    kMaxPhase: { value: (pe.lines * dkPhase) / 2, unit: "1/m", note: "k_max = N_lines·Δk/2 = 1/(2Δy)" },
    readSamples: { value: ro.samples, unit: "samples", note: `acquired (of ${ro.full} with read oversampling ×${p.oversampling.read})` },
    echoSample: { value: ro.echoSample, unit: "sample", note: "time index of k = 0 in the ADC window" },
    phaseLines: { value: pe.acquired, unit: "lines", note: `acquired (of ${pe.lines} with phase oversampling ${p.oversampling.phase})` },
    phaseStepArea: { value: pe.step, unit: "T·s/m", note: "ΔA = 1/(γ̄·FOV_phase,acquired)" },
    phaseEncodeTable: {
      value: `lines ${pe.first}…${pe.lines - 1}, area (line − ${pe.centre})·ΔA, ${p.phaseOrder} order`,
      unit: "",
      note: `largest area ${(maxPhaseArea(pe) * 1e6).toFixed(3)} mT·ms/m`,
    },
    sliceGradient: { value: exc.pulse.gradient, unit: "T/m" },
    rfBandwidth: { value: exc.pulse.gradient * GAMMA_BAR * (sliceSteps > 1 ? sliceSteps * p.slice.thickness : p.slice.thickness), unit: "Hz" },
    voxelVolume: { value: voxel, unit: "m^3" },
    relativeSnr: {
      value: relativeSnr(voxel, p.averages, pe.acquired, sliceSteps, ro.flat),
      unit: "",
      note: `∝ voxel·√(N_avg·N_lines·N_slice·T_adc), N_slice = slice-encoding steps (Edelstein et al. 1986), relative to ${SNR_REFERENCE}`,
    },
  };
  Object.assign(d, demandDerived(p, demand));
  return d;
}

/**
 * Peak gradient and slew per logical axis vs the hardware values entered (hardware.gmax, hardware.slew),
 * with headroom = 1 − demand/limit. The limits are applied per logical axis; for an oblique slice the bound
 * on a physical axis is reported beside them. Headroom is no nerve-stimulation, SAR or acoustic-noise check.
 */
export function demandDerived(p: Protocol, demand: Demand): Record<string, Derived> {
  const out: Record<string, Derived> = {};
  const names = ["Read", "Phase", "Slice"];
  const ax = logicalAxes(p);
  if (ax.angle !== 0) {
    // oblique: a physical axis carries Σ_l |axis_l[k]|·G_l at most (lobes on different logical axes may coincide)
    let worst = 0, worstSlew = 0;
    for (let k = 0; k < 3; k++) {
      const dirs = [ax.read, ax.phase, ax.slice];
      let g = 0, sl = 0;
      for (let l = 0; l < 3; l++) {
        g += Math.abs(dirs[l]![k]!) * demand.gradient[l]!;
        sl += Math.abs(dirs[l]![k]!) * demand.slew[l]!;
      }
      worst = Math.max(worst, g);
      worstSlew = Math.max(worstSlew, sl);
    }
    out["peakGradientPhysicalBound"] = {
      value: worst, unit: "T/m",
      note: `oblique: upper bound on one physical axis; ${worst > p.hardware.gmax ? "may exceed" : "within"} gmax if lobes coincide`,
    };
    out["peakSlewPhysicalBound"] = { value: worstSlew, unit: "T/m/s", note: `${worstSlew > p.hardware.slew ? "may exceed" : "within"} slew` };
  }
  for (let a = 0; a < 3; a++) {
    out[`peakGradient${names[a]}`] = {
      value: demand.gradient[a]!, unit: "T/m",
      note: `headroom ${((1 - demand.gradient[a]! / p.hardware.gmax) * 100).toFixed(0)} % against the gmax entered`,
    };
    out[`peakSlew${names[a]}`] = {
      value: demand.slew[a]!, unit: "T/m/s",
      note: `headroom ${((1 - demand.slew[a]! / p.hardware.slew) * 100).toFixed(0)} % against the slew rate entered`,
    };
  }
  return out;
}

/**
 * Centre (m, along the slice normal) of slice-encoding step 0 … P−1: the P
 * steps tile the slab centred at the slice position, so step p sits at
 * position + (p − (P−1)/2)·thickness, which is what the 3D sequence's
 * receiver phase puts there (gre.ts: w_c = position + thickness/2
 * for even P, step p at w_c + (p − floor(P/2))·thickness). One slice (2D): the
 * slice position.
 */
export function sliceStepCentre(p: number, P: number, dz: number, position: number): number {
  return position + (P % 2 === 0 ? dz / 2 : 0) + (p - Math.floor(P / 2)) * dz;
}
