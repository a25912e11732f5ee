/**
 * Geometry: the logical axes (read, phase, slice) as physical unit vectors in
 * the phantom's frame. Phantom coordinates x, y, z are RAS+ (x toward the
 * subject's right, y anterior, z superior), as in NIfTI.
 */
import type { Protocol, PhysicalAxis } from "./types.js";

export type Vec3 = [number, number, number];

const UNIT: Record<PhysicalAxis, Vec3> = { x: [1, 0, 0], y: [0, 1, 0], z: [0, 0, 1] };

export interface Axes {
  read: Vec3;
  phase: Vec3;
  slice: Vec3;
  /** Physical axis names, for reports. */
  names: { read: PhysicalAxis; phase: PhysicalAxis; slice: PhysicalAxis };
}

/** Logical-to-physical axes of a protocol. */
export function logicalAxes(p: Protocol): Axes {
  const slice: PhysicalAxis = p.slice.orientation === "axial" ? "z" : p.slice.orientation === "coronal" ? "y" : "x";
  const inPlane = (["x", "y", "z"] as PhysicalAxis[]).filter((a) => a !== slice);
  const phase = p.phaseDirection;
  const read = inPlane.find((a) => a !== phase)!;
  return { read: UNIT[read], phase: UNIT[phase], slice: UNIT[slice], names: { read, phase, slice } };
}

/** Physical position (m) of logical coordinates (u along read, v along phase, w along slice). */
export function toPhysical(ax: Axes, u: number, v: number, w: number, out: Float64Array | number[]): void {
  out[0] = ax.read[0] * u + ax.phase[0] * v + ax.slice[0] * w;
  out[1] = ax.read[1] * u + ax.phase[1] * v + ax.slice[1] * w;
  out[2] = ax.read[2] * u + ax.phase[2] * v + ax.slice[2] * w;
}
