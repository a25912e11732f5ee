/**
 * Compiled phantom shapes: inside test, bounding box and a conservative
 * signed distance, all in SI (m).
 *
 * Every shape lives in its own local frame (u, v, w): translate by the centre,
 * then rotate by −θ about z, where θ is the shape's rotation (positive turns x
 * towards y):
 *   u =  cosθ·(x−cx) + sinθ·(y−cy),   v = −sinθ·(x−cx) + cosθ·(y−cy),   w = z−cz.
 * 2D shapes (ellipse, rectangle) ignore z: they are infinite prisms along z.
 *
 * One class with a numeric kind code and a switch keeps the hot call sites
 * monomorphic (cellContents calls these up to ~10⁷ times).
 */
import type { Bounds } from "./types.js";

export type ShapeType = "ellipse" | "rectangle" | "ellipsoid" | "sphere" | "box" | "cylinder";
export type Axis = "x" | "y" | "z";

/** Shape parameters in SI, as the loader produces them. */
export type ShapeSpec = {
  /** Index into Phantom.tissues. */
  tissue: number;
  /** Optional label for messages and reports. */
  label?: string;
  /** Centre (m); for 2D shapes z is kept but has no effect. */
  center: readonly [number, number, number];
  /** Rotation about z through the centre (rad), x towards y. Default 0. */
  rotation?: number;
} & (
  | { type: "ellipse"; semiAxes: readonly [number, number] }
  | { type: "rectangle"; size: readonly [number, number] }
  | { type: "ellipsoid"; semiAxes: readonly [number, number, number] }
  | { type: "sphere"; radius: number }
  | { type: "box"; size: readonly [number, number, number] }
  | { type: "cylinder"; radius: number; length: number; axis: Axis }
);

const ELLIPSE = 0;
const RECTANGLE = 1;
const ELLIPSOID = 2;
const SPHERE = 3;
const BOX = 4;
const CYLINDER = 5;
/** Results of Shape.classifyCell(). */
export const CELL_OUTSIDE = -1;
export const CELL_INSIDE = 1;
export const CELL_CROSSES_XY = 0;
export const CELL_CROSSES = 2;

const CODES: Record<ShapeType, number> = { ellipse: ELLIPSE, rectangle: RECTANGLE, ellipsoid: ELLIPSOID, sphere: SPHERE, box: BOX, cylinder: CYLINDER };

/** A compiled shape. Construct with makeShape(). */
export class Shape {
  readonly type: ShapeType;
  readonly label: string;
  /** Index into Phantom.tissues. */
  readonly tissue: number;
  /** Centre (m). */
  readonly center: readonly [number, number, number];
  /** Rotation about z (rad). */
  readonly rotation: number;
  /** True for ellipse and rectangle (infinite along z). */
  readonly is2D: boolean;
  /** The SI parameters it was made from. */
  readonly spec: ShapeSpec;

  // Hot fields (numbers only, same layout for every kind).
  private readonly code: number;
  private readonly cx: number;
  private readonly cy: number;
  private readonly cz: number;
  private readonly cs: number;
  private readonly sn: number;
  /** Half extents along u, v, w (m): semi-axes, half sizes; cylinder: see below. */
  private readonly a: number;
  private readonly b: number;
  private readonly c: number;
  /** 1/a², 1/b², 1/c² for the quadrics. */
  private readonly ia2: number;
  private readonly ib2: number;
  private readonly ic2: number;
  /** Smallest semi-axis (ellipse/ellipsoid), for the distance bound. */
  private readonly minAxis: number;
  /** Cylinder: axis 0 = u, 1 = v, 2 = w; radius in a, half length in c. */
  private readonly axis: number;
  /** Bounding box (m), for a quick reject. */
  private readonly x0: number;
  private readonly x1: number;
  private readonly y0: number;
  private readonly y1: number;
  private readonly z0: number;
  private readonly z1: number;

  constructor(spec: ShapeSpec) {
    this.spec = spec;
    this.type = spec.type;
    this.label = spec.label ?? "";
    this.tissue = spec.tissue;
    this.center = spec.center;
    this.rotation = spec.rotation ?? 0;
    this.code = CODES[spec.type];
    this.is2D = this.code === ELLIPSE || this.code === RECTANGLE;
    [this.cx, this.cy, this.cz] = spec.center;
    this.cs = Math.cos(this.rotation);
    this.sn = Math.sin(this.rotation);
    let a = 0, b = 0, c = 0, axis = 2;
    switch (spec.type) {
      case "ellipse": [a, b] = spec.semiAxes; c = Infinity; break;
      case "rectangle": a = spec.size[0] / 2; b = spec.size[1] / 2; c = Infinity; break;
      case "ellipsoid": [a, b, c] = spec.semiAxes; break;
      case "sphere": a = b = c = spec.radius; break;
      case "box": a = spec.size[0] / 2; b = spec.size[1] / 2; c = spec.size[2] / 2; break;
      case "cylinder": a = b = spec.radius; c = spec.length / 2; axis = spec.axis === "x" ? 0 : spec.axis === "y" ? 1 : 2; break;
    }
    this.a = a;
    this.b = b;
    this.c = c;
    this.axis = axis;
    this.ia2 = 1 / (a * a);
    this.ib2 = 1 / (b * b);
    this.ic2 = Number.isFinite(c) ? 1 / (c * c) : 0;
    this.minAxis = Math.min(a, b, c);
    const bb = this.bounds();
    [this.x0, this.y0, this.z0] = bb.min;
    [this.x1, this.y1, this.z1] = bb.max;
  }

  /** True if the point (m) is inside or on the boundary. */
  contains(x: number, y: number, z: number): boolean {
    const dx = x - this.cx, dy = y - this.cy;
    const u = this.cs * dx + this.sn * dy;
    const v = this.cs * dy - this.sn * dx;
    switch (this.code) {
      case ELLIPSE:
        return u * u * this.ia2 + v * v * this.ib2 <= 1;
      case RECTANGLE:
        return Math.abs(u) <= this.a && Math.abs(v) <= this.b;
      case ELLIPSOID: {
        const w = z - this.cz;
        return u * u * this.ia2 + v * v * this.ib2 + w * w * this.ic2 <= 1;
      }
      case SPHERE: {
        const w = z - this.cz;
        return (u * u + v * v + w * w) * this.ia2 <= 1;
      }
      case BOX:
        return Math.abs(u) <= this.a && Math.abs(v) <= this.b && Math.abs(z - this.cz) <= this.c;
      default: {
        const w = z - this.cz;
        let ax: number, r2: number;
        if (this.axis === 2) { ax = w; r2 = u * u + v * v; }
        else if (this.axis === 0) { ax = u; r2 = v * v + w * w; }
        else { ax = v; r2 = u * u + w * w; }
        return Math.abs(ax) <= this.c && r2 <= this.a * this.a;
      }
    }
  }

  /**
   * Conservative signed distance (m) from the point to the boundary:
   * positive outside, negative inside, and |result| never exceeds the true
   * distance. Exact for rectangle, box, sphere and cylinder; for ellipses and
   * ellipsoids it is (q − 1)·min(semi-axes) with q the scaled radius, which
   * follows from the triangle inequality of the scaled norm. 2D shapes
   * measure in x, y only.
   */
  distanceBound(x: number, y: number, z: number): number {
    const dx = x - this.cx, dy = y - this.cy;
    const u = this.cs * dx + this.sn * dy;
    const v = this.cs * dy - this.sn * dx;
    switch (this.code) {
      case ELLIPSE:
        return (Math.sqrt(u * u * this.ia2 + v * v * this.ib2) - 1) * this.minAxis;
      case RECTANGLE:
        return boxSdf2(Math.abs(u) - this.a, Math.abs(v) - this.b);
      case ELLIPSOID: {
        const w = z - this.cz;
        return (Math.sqrt(u * u * this.ia2 + v * v * this.ib2 + w * w * this.ic2) - 1) * this.minAxis;
      }
      case SPHERE: {
        const w = z - this.cz;
        return Math.sqrt(u * u + v * v + w * w) - this.a;
      }
      case BOX: {
        const qx = Math.abs(u) - this.a, qy = Math.abs(v) - this.b, qz = Math.abs(z - this.cz) - this.c;
        const ox = qx > 0 ? qx : 0, oy = qy > 0 ? qy : 0, oz = qz > 0 ? qz : 0;
        const inner = Math.max(qx, qy, qz);
        return Math.sqrt(ox * ox + oy * oy + oz * oz) + (inner < 0 ? inner : 0);
      }
      default: {
        const w = z - this.cz;
        let ax: number, r2: number;
        if (this.axis === 2) { ax = w; r2 = u * u + v * v; }
        else if (this.axis === 0) { ax = u; r2 = v * v + w * w; }
        else { ax = v; r2 = u * u + w * w; }
        return boxSdf2(Math.sqrt(r2) - this.a, Math.abs(ax) - this.c);
      }
    }
  }

  /**
   * Classifies the ball of radius h (m) around a point: 1 = certainly inside,
   * −1 = certainly outside, 0 = maybe crosses the boundary. For 2D shapes the
   * ball is a disc in x, y.
   */
  classifyBall(x: number, y: number, z: number, h: number): -1 | 0 | 1 {
    const d = this.distanceBound(x, y, z);
    if (d >= h) return -1;
    if (d <= -h) return 1;
    return 0;
  }

  /**
   * Classifies a cell around (x, y, z) that lies within hxy (m) of the point
   * in x–y, within hz (m) along z, and within h3 (m) in 3D:
   * CELL_OUTSIDE, CELL_INSIDE, CELL_CROSSES_XY (the boundary may cross the
   * cell but the shape does not change along z inside it) or CELL_CROSSES.
   * Prisms along z (2D shapes, boxes, z-cylinders) are tested in x–y and
   * along z separately, which is much sharper than a ball for thin slices.
   */
  classifyCell(x: number, y: number, z: number, hxy: number, hz: number, h3: number): number {
    if (x + hxy < this.x0 || x - hxy > this.x1 || y + hxy < this.y0 || y - hxy > this.y1 || z + hz < this.z0 || z - hz > this.z1) {
      return CELL_OUTSIDE;
    }
    const code = this.code;
    if (code === ELLIPSE || code === RECTANGLE) {
      const d = this.distanceBound(x, y, z);
      return d >= hxy ? CELL_OUTSIDE : d <= -hxy ? CELL_INSIDE : CELL_CROSSES_XY;
    }
    if (code === BOX || (code === CYLINDER && this.axis === 2)) {
      const dx = x - this.cx, dy = y - this.cy;
      const u = this.cs * dx + this.sn * dy;
      const v = this.cs * dy - this.sn * dx;
      const dxy = code === BOX ? boxSdf2(Math.abs(u) - this.a, Math.abs(v) - this.b) : Math.sqrt(u * u + v * v) - this.a;
      const dz = Math.abs(z - this.cz) - this.c;
      if (dxy >= hxy || dz >= hz) return CELL_OUTSIDE;
      if (dz <= -hz) return dxy <= -hxy ? CELL_INSIDE : CELL_CROSSES_XY;
      return CELL_CROSSES;
    }
    const d = this.distanceBound(x, y, z);
    return d >= h3 ? CELL_OUTSIDE : d <= -h3 ? CELL_INSIDE : CELL_CROSSES;
  }

  /** Axis-aligned bounding box (m); z is ±Infinity for 2D shapes. */
  bounds(): Bounds {
    const cs = Math.abs(this.cs), sn = Math.abs(this.sn);
    let hx: number, hy: number, hz: number;
    switch (this.code) {
      case ELLIPSE:
      case ELLIPSOID:
        // Extremes of a rotated ellipse: √((a cosθ)² + (b sinθ)²) along x.
        hx = Math.hypot(this.a * cs, this.b * sn);
        hy = Math.hypot(this.a * sn, this.b * cs);
        hz = this.c;
        break;
      case SPHERE:
        hx = hy = hz = this.a;
        break;
      case CYLINDER: {
        // Local half extents along u, v, w, then the rotated box.
        const eu = this.axis === 0 ? this.c : this.a;
        const ev = this.axis === 1 ? this.c : this.a;
        const ew = this.axis === 2 ? this.c : this.a;
        if (this.axis === 2) { hx = hy = this.a; } // a circle is rotation invariant
        else { hx = eu * cs + ev * sn; hy = eu * sn + ev * cs; }
        hz = ew;
        break;
      }
      default:
        hx = this.a * cs + this.b * sn;
        hy = this.a * sn + this.b * cs;
        hz = this.c;
    }
    if (this.is2D) hz = Infinity;
    return {
      min: [this.cx - hx, this.cy - hy, this.is2D ? -Infinity : this.cz - hz],
      max: [this.cx + hx, this.cy + hy, this.is2D ? Infinity : this.cz + hz],
    };
  }
}

/** Exact signed distance to a 2D box given q = |p| − half extents. */
function boxSdf2(qx: number, qy: number): number {
  const ox = qx > 0 ? qx : 0, oy = qy > 0 ? qy : 0;
  const inner = qx > qy ? qx : qy;
  return Math.sqrt(ox * ox + oy * oy) + (inner < 0 ? inner : 0);
}

/** Compiles a shape from SI parameters. Sizes must be positive (the loader checks). */
export function makeShape(spec: ShapeSpec): Shape {
  return new Shape(spec);
}
