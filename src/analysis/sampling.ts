/**
 * Remarks on how the phantom meets the sampling grid, made before a run:
 * shapes finer than the isochromat spacing (they can fall between the sample
 * points and vanish, or appear at a neighbouring point), and an object wider
 * than the field of view (it folds over along phase; along read the receiver
 * filter removes it, or without the filter it folds over too). The sizes come from
 * the phantom's shape bounds and the protocol's geometry.
 */
import type { Phantom } from "../phantom/index.js";
import { logicalAxes, type Protocol } from "../protocol/index.js";

/** Extent (m) of a box along a unit direction; infinite box sides (2D shapes along z) are skipped. */
function extentAlong(min: number[], max: number[], dir: readonly number[]): number {
  let e = 0;
  for (let k = 0; k < 3; k++) {
    const w = max[k]! - min[k]!;
    if (dir[k] !== 0 && Number.isFinite(w)) e += Math.abs(dir[k]!) * w;
  }
  return e;
}

export interface SamplingRemarks {
  /** Shapes finer than the isochromat spacing (messages). */
  fine: string[];
  /** Object wider than the FOV (messages). */
  fov: string[];
  /** Isochromat spacing in the plane (m). */
  spacing: number;
}

/** See the file comment; `density` is isochromats per voxel along each in-plane axis. */
export function samplingRemarks(ph: Phantom, p: Protocol, density: number): SamplingRemarks {
  const ax = logicalAxes(p);
  const dx = p.fov.read / p.matrix.read, dy = p.fov.phase / p.matrix.phase;
  const spacing = Math.max(dx, dy) / density;
  const fine: string[] = [];
  const lo = [Infinity, Infinity, Infinity], hi = [-Infinity, -Infinity, -Infinity];
  ph.shapes.forEach((s, i) => {
    const b = s.bounds();
    for (let k = 0; k < 3; k++) {
      lo[k] = Math.min(lo[k]!, b.min[k]!);
      hi[k] = Math.max(hi[k]!, b.max[k]!);
    }
    const w = Math.min(extentAlong(b.min, b.max, ax.read), extentAlong(b.min, b.max, ax.phase));
    if (w < spacing && fine.length < 3) {
      const name = s.spec.label ? `shapes[${i}] ("${s.spec.label}")` : `shapes[${i}]`;
      fine.push(`${name} is ${(w * 1e3).toPrecision(3)} mm across, finer than the isochromat spacing of ${(spacing * 1e3).toPrecision(3)} mm (voxel / --density): it may vanish between sample points or appear in a neighbouring voxel; raise --density or the matrix`);
    }
  });
  const fov: string[] = [];
  const wPhase = extentAlong(lo, hi, ax.phase), wRead = extentAlong(lo, hi, ax.read);
  const fovPhase = p.fov.phase * (1 + p.oversampling.phase);
  if (wPhase > fovPhase * (1 + 1e-9)) {
    fov.push(`the object spans ${(wPhase * 1e2).toPrecision(3)} cm along phase (${ax.names.phase}), more than the ${(fovPhase * 1e2).toPrecision(3)} cm the phase encoding covers: the parts outside fold over (wrap) into the image`);
  }
  const sampled = p.fov.read * p.oversampling.read;
  if (wRead > sampled * (1 + 1e-9)) {
    fov.push(`the object spans ${(wRead * 1e2).toPrecision(3)} cm along read (${ax.names.read}), more than the sampled read FOV of ${(sampled * 1e2).toPrecision(3)} cm (FOV × read oversampling): ` +
      (p.receiverFilter
        ? "the receiver filter removes the signal from outside it"
        : "with the receiver filter off the parts outside fold over (wrap) into the image"));
  }
  return { fine, fov, spacing };
}
