/**
 * Geometry: the logical axes (read, phase, slice) as physical unit vectors in
 * the phantom's frame. Phantom coordinates x, y, z are RAS+ (x toward the
 * subject's right, y anterior, z superior), as in NIfTI.
 *
 * An oblique slice is the pure orientation turned by `slice.angle` about one
 * logical in-plane axis (`slice.tiltAxis`): tilting about read turns phase
 * toward slice, tilting about phase turns read toward slice,
 *   a′ = cosθ·a + sinθ·s,  s′ = −sinθ·a + cosθ·s,
 * so the three axes stay orthonormal and right-handed as before.
 */
import type { Protocol, PhysicalAxis } from "./types.js";

export type Vec3 = [number, number, number];

const UNIT: Record<PhysicalAxis, Vec3> = { x: [1, 0, 0], y: [0, 1, 0], z: [0, 0, 1] };

export interface Axes {
  read: Vec3;
  phase: Vec3;
  slice: Vec3;
  /** Physical axis names of the un-tilted orientation, for reports. */
  names: { read: PhysicalAxis; phase: PhysicalAxis; slice: PhysicalAxis };
  /** Tilt (rad) about `tiltAxis`; 0 when not oblique. */
  angle: number;
  tiltAxis: "read" | "phase";
}

function turn(a: Vec3, s: Vec3, c: number, sn: number): [Vec3, Vec3] {
  const a2: Vec3 = [c * a[0] + sn * s[0], c * a[1] + sn * s[1], c * a[2] + sn * s[2]];
  const s2: Vec3 = [-sn * a[0] + c * s[0], -sn * a[1] + c * s[1], -sn * a[2] + c * s[2]];
  return [a2, s2];
}

/** Logical-to-physical axes of a protocol (oblique tilt applied). */
export function logicalAxes(p: Pick<Protocol, "slice" | "phaseDirection">): Axes {
  const slice: PhysicalAxis = p.slice.orientation === "axial" ? "z" : p.slice.orientation === "coronal" ? "y" : "x";
  const inPlane = (["x", "y", "z"] as PhysicalAxis[]).filter((a) => a !== slice);
  const phase = p.phaseDirection;
  const read = inPlane.find((a) => a !== phase)!;
  let r = UNIT[read], ph = UNIT[phase], s = UNIT[slice];
  const th = p.slice.angle ?? 0;
  const tiltAxis = p.slice.tiltAxis ?? "read";
  if (th !== 0) {
    const c = Math.cos(th), sn = Math.sin(th);
    if (tiltAxis === "read") [ph, s] = turn(ph, s, c, sn);
    else [r, s] = turn(r, s, c, sn);
  }
  return { read: r, phase: ph, slice: s, names: { read, phase, slice }, angle: th, tiltAxis };
}

/** Physical position (m) of logical coordinates (u along read, v along phase, w along slice). */
export function toPhysical(ax: Axes, u: number, v: number, w: number, out: Float64Array | number[]): void {
  out[0] = ax.read[0] * u + ax.phase[0] * v + ax.slice[0] * w;
  out[1] = ax.read[1] * u + ax.phase[1] * v + ax.slice[1] * w;
  out[2] = ax.read[2] * u + ax.phase[2] * v + ax.slice[2] * w;
}

/**
 * Multi-slice geometry: slice k (k = 0 … count−1, in space along the slice
 * normal) is centred at position + (k − (count−1)/2)·(thickness + gap).
 * `order` lists the spatial indices in acquisition order: sequential 0,1,2,…;
 * interleaved the even indices then the odd ones (0,2,4,…,1,3,…), so
 * neighbours are excited half a TR apart.
 */
export function slicePositions(p: Pick<Protocol, "slice" | "slices">): { positions: number[]; order: number[]; spacing: number } {
  const n = p.slices.count;
  const spacing = p.slice.thickness + p.slices.gap;
  const positions = Array.from({ length: n }, (_, k) => p.slice.position + (k - (n - 1) / 2) * spacing);
  const order: number[] = [];
  if (p.slices.order === "sequential") for (let k = 0; k < n; k++) order.push(k);
  else {
    for (let k = 0; k < n; k += 2) order.push(k);
    for (let k = 1; k < n; k += 2) order.push(k);
  }
  return { positions, order, spacing };
}
