/**
 * The normalized protocol: every value in SI (s, m, T, T/m, T/m/s, Hz, rad).
 * Produced by parseProtocol() from a protocol file plus --set overrides.
 */

/** A sequence name declared in sequence/registry.ts (checked by the parser). */
export type SequenceKind = string;
export type Orientation = "axial" | "coronal" | "sagittal";
export type PhysicalAxis = "x" | "y" | "z";
export type Spoiling = "ideal" | "rf" | "none";
export type PhaseOrder = "linear" | "centre-out";
export type PulseShape = "sinc" | "hard";
export type PartialFourierRecon = "zero-fill" | "homodyne";
export type SliceOrder = "sequential" | "interleaved";
export type EchoOrder = "linear" | "centric";

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
  /** Reconstructed matrix (pixels); slice > 1 (slice-encoding steps) only for 3D sequences. */
  matrix: { read: number; phase: number; slice: number };
  /** Warnings raised while reading the protocol (deprecated keys, …); reported with the run. */
  warnings: string[];
  slice: {
    /** Slice thickness (m); for 3D the slice-encoding step thickness (the slab is slice-encoding steps × thickness). */
    thickness: number;
    /** Slice (or slab) centre along the slice normal (m). */
    position: number;
    orientation: Orientation;
    /** Oblique tilt (rad) of the slice plane about `tiltAxis`; 0 = the pure orientation. */
    angle: number;
    /** Logical in-plane axis the slice plane is tilted about. */
    tiltAxis: "read" | "phase";
  };
  /** Several parallel 2D slices: count, gap between neighbours (m), acquisition order. */
  slices: { count: number; gap: number; order: SliceOrder };
  /** Physical axis of the phase-encode direction (must lie in the slice plane). */
  phaseDirection: PhysicalAxis;
  /** Sign of the readout gradient: +1 (k read from −k_max to +k_max in time) or −1. */
  readoutPolarity: 1 | -1;
  /** Receiver bandwidth per pixel (Hz/px) of the reconstructed read matrix. */
  pixelBandwidth: number;
  /** How the bandwidth was written in the file, for the report. */
  bandwidthAsGiven: string;
  /** Echo time and repetition time (s). For RARE `te` is the effective TE (echo of the k-space centre line). */
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
  /**
   * Partial Fourier: acquired fraction of the phase lines (0.5 < f ≤ 1; early negative-k lines skipped),
   * acquired fraction of the readout (asymmetric echo: early samples skipped), and the recon of the missing part.
   */
  partialFourier: { phase: number; read: number; method: PartialFourierRecon };
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
  /** Balanced SSFP: how the steady state is approached (dummy TRs only, or an α/2 pulse TR/2 before the first α). */
  ssfpPreparation: "none" | "half-alpha";
  /** RARE: echoes per excitation, echo spacing (s; 0 = the shortest the hardware allows), k-space order of the echoes. */
  echoTrainLength: number;
  echoSpacing: number;
  echoOrder: EchoOrder;
  /** EPI: excitations per image (1 = single shot) and echo type. */
  shots: number;
  epiEcho: "gradient" | "spin";
}
