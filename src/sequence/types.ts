/**
 * The Block model. A Sequence is the whole scan flattened into blocks in time
 * order. Gradients are on the logical axes [read, phase, slice] (T/m; areas in
 * T·s/m); the protocol's geometry maps them to physical x, y, z.
 *
 * Between RF pulses every gradient only rotates spins about z, so a `free`
 * block needs only its duration and its gradient area (zeroth moment):
 * precession and relaxation over it are exact in one step.
 */

import type { Protocol } from "../protocol/types.js";

export type Vec3 = [number, number, number];

/** A sampled RF pulse with the gradient played during it. */
export interface RFWaveform {
  /** Index of this waveform in Sequence.pulses. */
  id: number;
  name: string;
  /** Step length (s); sample s is the field over [s·dt, (s+1)·dt). */
  dt: number;
  /** B1 in the rotating frame (T), real and imaginary parts, one value per step. */
  b1re: Float64Array;
  b1im: Float64Array;
  /** Total duration (s) = steps · dt. */
  duration: number;
  /** Gradient on the logical slice axis during the pulse (T/m). */
  gradient: number;
  /** Nominal flip angle on resonance (rad). */
  flip: number;
  /** Time of the pulse's effective centre from its start (s). */
  centre: number;
}

export type Block =
  /** RF pulse `pulse`, played with an extra phase (rad) added to B1. */
  | { kind: "rf"; pulse: number; phase: number }
  /** Gradient-only interval: duration (s) and area per logical axis (T·s/m). */
  | { kind: "free"; duration: number; area: Vec3 }
  /**
   * Readout of `samples` points, the first at the block start, spaced `dwell`
   * (s), under the constant gradient `grad` (T/m). Samples go to k-space row
   * `row`, multiplied by weight·exp(−i·phase) (receiver phase).
   * The block lasts samples·dwell.
   */
  | { kind: "adc"; samples: number; dwell: number; grad: Vec3; row: number; phase: number; weight: number }
  /** Ideal spoiling: transverse magnetization is set to zero. */
  | { kind: "spoil" };

/** Derived quantities of a sequence that other stages compute with. */
export interface SequenceQuantities {
  /** Slice-select gradient during the excitation (T/m); 0 for a non-selective pulse. */
  sliceGradient: number;
  /** Spin echoes: slice-select gradient during the refocusing pulse(s) (T/m); absent without one. */
  refocusGradient?: number;
  /** Time between successive echoes of an echo train (s); absent without a train. */
  echoSpacing?: number;
  /** EPI: time between adjacent phase-encoding lines, echo spacing / shots (s); sets the phase-direction shift. */
  effectiveEchoSpacing?: number;
  /** Phase lines per shot seen by the EPI phase blips (default matrix.phase) and the blip sign (±1, default +1). */
  phaseLinesEffective?: number;
  phaseBlipSign?: number;
}

/**
 * A sequence declares itself: its protocol name, what it is, its builder,
 * the protocol defaults that depend on it, and what the pipeline must know
 * about it. Adding a sequence = one module exporting a definition, plus one
 * line in sequence/registry.ts.
 */
export interface SequenceDefinition {
  /** Value of the protocol's `sequence` key. */
  name: string;
  /** One line for help, errors and `isofold protocol`. */
  description: string;
  build: (p: Protocol) => Sequence;
  /** Protocol defaults that differ between sequences (SI): flip angle (rad) and echo train length. */
  defaults: { flip: number; echoTrainLength: number };
  /** Whether the protocol refocuses (spin echoes): its crushers must then be resolved through the slice. */
  refocuses: (p: Protocol) => boolean;
  /** Whether it spoils between TRs (a balanced sequence does not: no spoiler gradients to resolve). */
  spoils: boolean;
  /** A 3D slab (slice-encoding steps in matrix.slice) rather than 2D slices. */
  threeD: boolean;
}

/** A quantity for the report: SI value, display unit and a short meaning. */
export interface Derived {
  value: number | string;
  unit: string;
  note?: string;
}

/**
 * How the acquired k-space maps onto the full Cartesian grid the recon
 * transforms. Rows are slice-encoding steps × phase lines of the full grid (lines a
 * partial-Fourier scan skips stay zero). Acquired sample j of row r goes to
 * column offset + j, or offset + (samples − 1 − j) when reversed[r] = 1 (the
 * row was read under a negative readout gradient, so its samples run from
 * +k to −k in time).
 */
export interface KGrid {
  /** Columns of the full grid (read matrix × oversampling). */
  read: number;
  offset: number;
  /** One flag per row; null when no row is reversed. */
  reversed: Uint8Array | null;
  /** Partial Fourier: acquired fractions and the recon of the missing part. */
  partialFourier: { phase: number; read: number; method: "zero-fill" | "homodyne" };
  /** First acquired phase line (lines below it are zero). */
  phaseFirst: number;
  /** Transform along slice-encoding steps (3D) or treat them as separate slices. */
  threeD: boolean;
}

export interface Sequence {
  name: string;
  pulses: RFWaveform[];
  blocks: Block[];
  /** Acquired k-space grid: rows = slice-encoding steps × phase lines, each `read` samples. */
  kspace: { slice: number; phase: number; read: number };
  /** Reconstructed matrix after oversampling removal. */
  image: { slice: number; phase: number; read: number };
  /** Index of the read sample at k = 0 and of the phase line at k = 0. */
  centre: { read: number; phase: number };
  /** Minimum TE and TR the waveforms allow (s), and the TE/TR played. */
  timing: { teMin: number; trMin: number; te: number; tr: number; scanTime: number };
  /** Derived quantities for the report and `isofold protocol`. */
  derived: Record<string, Derived>;
  /** The derived quantities other stages read, typed (SI; also in `derived`). */
  quantities: SequenceQuantities;
  /** Acquired → full-grid map for the recon. */
  grid: KGrid;
  /** Phase-encode table: line index and phase-encode area (T·s/m) in acquisition order (first slice-encoding step for 3D). */
  phaseTable: { line: number; area: number }[];
  /** Time of one TR's active part (s), for multi-slice packing: excitation to the end of the last gradient. */
  activeTime: number;
  /**
   * Echo time (s) of each phase line of the full grid — excitation centre to the line's k = 0 sample —
   * where it varies along an echo train (RARE, EPI); NaN for lines not acquired.
   */
  echoTimes?: Float64Array;
}
