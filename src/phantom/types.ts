/**
 * The phantom as the rest of isofold sees it: SI numbers only, tissues by
 * index, compiled shapes, and an optional B0 offset model.
 */
import type { Shape } from "./shapes.js";

/** Fat model of a tissue that holds fat: a single methylene peak or the multi-peak spectrum. */
export type FatModel = "single" | "multi";

/** One tissue: relaxation in seconds, proton density relative to pure water. */
export interface Tissue {
  /** Name used in the phantom file or the library ("muscle"). */
  name: string;
  /** Relative proton density, plain number 0..1 (pure water = 1). */
  pd: number;
  /** Longitudinal relaxation time T1 (s). */
  t1: number;
  /** Transverse relaxation time T2 (s). */
  t2: number;
  /** Effective transverse relaxation T2* (s), T2* ≤ T2; the intra-voxel dephasing this tissue carries by itself. */
  t2star: number;
  /** Fraction of the proton density that is fat: 0 = all water … 1 = all fat. */
  fatFraction: number;
  /** Fat spectrum model for the fat part; undefined = the simulator default. */
  fatModel?: FatModel;
  /** Library tissues: status and source of each value in plain words (pd, t1, t2, t2star, fatFraction); undefined for a tissue given in the phantom file. */
  source?: Record<string, string>;
}

/** Axis-aligned bounds (m); z may be ±Infinity for 2D shapes. */
export interface Bounds {
  min: [number, number, number];
  max: [number, number, number];
}

/** A loaded, validated phantom. Every number is SI (m, s, Hz). */
export interface Phantom {
  name: string;
  description: string;
  /** The file it came from (for messages and reports). */
  file: string;
  /** Field strength (T) the library tissues were chosen for. */
  fieldT: number;
  /** Tissues; Shape.tissue indexes this array. */
  tissues: Tissue[];
  /** Compiled shapes in painting order (later shapes overwrite earlier ones). */
  shapes: Shape[];
  /** B0 offset (Hz) at a position (m), or null for a perfect field. */
  b0: ((x: number, y: number, z: number) => number) | null;
  /** Human-readable description of the B0 model, or null. */
  b0Description: string | null;
  /** Non-fatal remarks for the report (e.g. library values used at a field they were not measured at). */
  warnings: string[];
}
