/**
 * The normalized protocol: every value in SI (s, m, T, T/m, T/m/s, Hz, rad).
 * Produced by parseProtocol() from a protocol file plus --set overrides.
 */

export type SequenceKind = "gre" | "se";
export type Orientation = "axial" | "coronal" | "sagittal";
export type PhysicalAxis = "x" | "y" | "z";
export type Spoiling = "ideal" | "rf" | "none";
export type PhaseOrder = "linear" | "centre-out";
export type PulseShape = "sinc" | "hard";

/** An RF pulse as prescribed. */
export interface PulseSpec {
  shape: PulseShape;
  /** Pulse duration (s). */
  duration: number;
  /** Time-bandwidth product of the windowed sinc (dimensionless); ignored for hard pulses. */
  tbw: number;
  /** Number of time steps the Bloch engine uses inside the pulse. */
  steps: number;
}

export interface Protocol {
  sequence: SequenceKind;
  /** Main field B0 (T). */
  field: number;
  /** Field of view along the logical read and phase axes (m). */
  fov: { read: number; phase: number };
  /** Reconstructed matrix (pixels). */
  matrix: { read: number; phase: number };
  slice: {
    /** Slice thickness (m). */
    thickness: number;
    /** Slice centre along the slice normal (m). */
    position: number;
    orientation: Orientation;
  };
  /** Physical axis of the phase-encode direction (must lie in the slice plane). */
  phaseDirection: PhysicalAxis;
  /** Receiver bandwidth per pixel (Hz/px) of the reconstructed read matrix. */
  pixelBandwidth: number;
  /** How the bandwidth was written in the file, for the report. */
  bandwidthAsGiven: string;
  /** Echo time and repetition time (s). */
  te: number;
  tr: number;
  /** Excitation flip angle (rad). */
  flip: number;
  /** Refocusing flip angle for spin echo (rad). */
  refocusFlip: number;
  /** Readout oversampling factor (≥ 1) and phase oversampling fraction (≥ 0). */
  oversampling: { read: number; phase: number };
  /** Model the receiver anti-alias filter on the readout (true) or not (false: readout wraps). */
  receiverFilter: boolean;
  hardware: {
    /** Maximum gradient amplitude per axis (T/m). */
    gmax: number;
    /** Maximum slew rate per axis (T/m/s). */
    slew: number;
  };
  excitation: PulseSpec;
  refocusing: PulseSpec;
  spoiling: Spoiling;
  /** RF spoiling phase increment (rad), quadratic schedule φ_n = n(n+1)/2·increment. */
  rfSpoilIncrement: number;
  /** TRs played before the first acquired line, to approach steady state. */
  dummyScans: number;
  phaseOrder: PhaseOrder;
  /** Number of averages (acquisitions of each line, averaged). */
  averages: number;
  /** Crusher area around the refocusing pulse, in cycles of phase across the slice thickness. */
  crusherCycles: number;
  /** Spoiler area at the end of each TR, in cycles across the slice thickness. */
  spoilerCycles: number;
  /** Shim offset: a global frequency offset (Hz) of every spin from the receiver/transmitter centre frequency. */
  shim: number;
}
