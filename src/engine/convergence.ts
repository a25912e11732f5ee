/**
 * A-posteriori check of the through-slice sampling: the sequence is run on one
 * probe column (in-plane centre, each tissue on resonance plus the global
 * offset) twice, on the chosen through-slice grid and on the same grid shifted
 * by half a step. A converged grid gives the same signal (both are midpoint
 * rules of one smooth integral); an aliased pathway (sequence/pathways.ts)
 * enters the two with opposite signs for odd alias orders, so the relative
 * difference measures it. Cost: 2 × sliceCount × tissues isochromats.
 */
import type { Axes } from "../protocol/geometry.js";
import type { Sequence } from "../sequence/types.js";
import { probeColumn } from "../isochromats/index.js";
import { simulateSerial } from "./index.js";

export interface SliceConvergence {
  /** ‖s − s_shifted‖ / ‖s‖ over every ADC sample of the probe. */
  relativeChange: number;
  tolerance: number;
  converged: boolean;
  /** Tissues probed. */
  tissues: number;
}

/** Default tolerance of the half-step check (relative L2 change of the probe signal); the centre probe overstates the image-wide error about 2–3× (test/through-slice.test.ts). */
export const SLICE_CONVERGENCE_TOLERANCE = 0.02;

export function checkSliceConvergence(
  seq: Sequence,
  tissues: { pd: number; t1: number; t2: number }[],
  geo: { axes: Axes; thickness: number; position: number; offsetHz: number },
  sliceCount: number, sliceExtent: number, tolerance = SLICE_CONVERGENCE_TOLERANCE,
): SliceConvergence {
  // up to four tissues of distinct relaxation, largest proton density first: the check must stay cheap
  const seen = new Set<string>();
  const probe = [...tissues].filter((t) => t.pd > 0).sort((a, b) => b.pd - a.pd).filter((t) => {
    const k = `${t.t1}/${t.t2}`;
    if (seen.has(k)) return false;
    seen.add(k);
    return true;
  }).slice(0, 4);
  if (probe.length === 0) return { relativeChange: 0, tolerance, converged: true, tissues: 0 };
  const run = (shift: number) => {
    const iso = probeColumn(probe, geo.axes, geo.thickness, geo.position, sliceCount, sliceExtent, geo.offsetHz, shift);
    // the direct readout (the oracle): a probe holds few isochromats, and predicting both operators' costs and a fold took about as long as its readout
    return simulateSerial(seq, iso, { receiverFilter: false, readout: "direct" }).kspace;
  };
  const a = run(0), b = run(0.5);
  let num = 0, den = 0;
  for (let i = 0; i < a.re.length; i++) {
    const dr = a.re[i]! - b.re[i]!, di = a.im[i]! - b.im[i]!;
    num += dr * dr + di * di;
    den += a.re[i]! * a.re[i]! + a.im[i]! * a.im[i]!;
  }
  const rel = den > 0 ? Math.sqrt(num / den) : 0;
  return { relativeChange: rel, tolerance, converged: rel <= tolerance, tissues: probe.length };
}
