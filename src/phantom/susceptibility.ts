/**
 * Off-resonance from susceptibility differences: spheres and infinite
 * cylinders of Δχ (SI volume susceptibility, relative to the surrounding
 * medium) in a uniform main field B0 along +z, first order in Δχ, with the
 * Lorentz sphere correction (the shift nuclei see), relative to the far field
 * of the surrounding medium. Closed forms (Schenck 1996, Med. Phys. 23:815;
 * cylinder: Ogawa et al. 1993, Biophys. J. 64:803; both in Haacke et al.
 * 1999, ch. 25):
 *
 *   sphere radius a, centre c, r = |p − c|, cos θ = (p − c)_z / r:
 *     outside  ΔB/B0 = (Δχ/3)·(a/r)³·(3cos²θ − 1)
 *     inside   ΔB/B0 = 0
 *   cylinder radius a, axis through c along unit n, θ = angle(n, z),
 *   ρ = component of p − c perpendicular to n (ρ = |ρ|), φ its azimuth from
 *   the projection of z on the plane ⟂ n:
 *     outside  ΔB/B0 = (Δχ/2)·(a/ρ)²·sin²θ·cos 2φ = (Δχ/2)·(a²/ρ²)·(2ρ_z²/ρ² − sin²θ)
 *     inside   ΔB/B0 = (Δχ/6)·(3cos²θ − 1)
 *
 * (sin²θ·cos 2φ = 2ρ_z²/ρ² − sin²θ because ρ·ẑ = ρ·ẑ⊥ = ρ·sinθ·cos φ.)
 * Offsets of several objects add (superposition, valid to first order).
 * Frequency offset Δf = γ̄·B0·(ΔB/B0) in Hz.
 */
import { GAMMA_BAR } from "../constants.js";
import { joinPath, userError, type Origin } from "../errors.js";
import { quantity, positive } from "../units.js";
import type { B0Model } from "./b0.js";

/** One susceptibility object, SI. */
export type ChiObject =
  | { shape: "sphere"; center: [number, number, number]; radius: number; deltaChi: number }
  | { shape: "cylinder"; center: [number, number, number]; radius: number; direction: [number, number, number]; deltaChi: number };

/**
 * ΔB/B0 (dimensionless) at (x, y, z) m from one object; closed forms above.
 */
export function chiFieldRatio(o: ChiObject, x: number, y: number, z: number): number {
  const px = x - o.center[0], py = y - o.center[1], pz = z - o.center[2];
  const a = o.radius;
  if (o.shape === "sphere") {
    const r2 = px * px + py * py + pz * pz;
    if (r2 <= a * a) return 0;
    const a3r3 = (a * a * a) / (r2 * Math.sqrt(r2));
    return (o.deltaChi / 3) * a3r3 * ((3 * pz * pz) / r2 - 1);
  }
  const [nx, ny, nz] = o.direction;
  const along = px * nx + py * ny + pz * nz;
  const rx = px - along * nx, ry = py - along * ny, rz = pz - along * nz;
  const rho2 = rx * rx + ry * ry + rz * rz;
  const cos2 = nz * nz, sin2 = 1 - cos2;
  if (rho2 <= a * a) return (o.deltaChi / 6) * (3 * cos2 - 1);
  return (o.deltaChi / 2) * ((a * a) / rho2) * ((2 * rz * rz) / rho2 - sin2);
}

const CHI_RE = /^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*ppm\s*$/;

/** Δχ as "9.41 ppm" or a plain number (SI, e.g. 9.41e-6). */
function parseChi(raw: unknown, o: Origin): number {
  if (typeof raw === "number" && Number.isFinite(raw)) {
    if (Math.abs(raw) > 1e-3) throw userError(o, `Δχ ${raw} is implausibly large for a plain SI number; write it in ppm, e.g. "9.41 ppm"`);
    return raw;
  }
  if (typeof raw === "string") {
    const m = CHI_RE.exec(raw);
    if (m) return Number(m[1]) * 1e-6;
  }
  throw userError(o, `expected a susceptibility difference like "9.41 ppm" (air in water) or a plain SI number, got ${JSON.stringify(raw)}`);
}

function obj(raw: unknown, o: Origin, what: string): Record<string, unknown> {
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) throw userError(o, `expected ${what}, got ${JSON.stringify(raw)}`);
  return raw as Record<string, unknown>;
}

const AXES: Record<string, [number, number, number]> = { x: [1, 0, 0], y: [0, 1, 0], z: [0, 0, 1] };

/**
 * Parses `{ "objects": [ { "shape": "sphere", "center": [...], "radius": "1 cm",
 * "deltaChi": "9.41 ppm" }, { "shape": "cylinder", "center": [...], "radius": …,
 * "direction": "x" | [dx, dy, dz], "deltaChi": … } ] }` into a B0 model at
 * field `fieldT` (T).
 */
export function parseSusceptibility(raw: unknown, origin: Origin, fieldT: number): B0Model {
  const example = `{ "objects": [ { "shape": "sphere", "center": ["0 cm", "0 cm", "0 cm"], "radius": "1 cm", "deltaChi": "9.41 ppm" } ] }`;
  const top = obj(raw, origin, example);
  for (const k of Object.keys(top)) if (k !== "objects") throw userError({ ...origin, path: joinPath(origin.path, k) }, `unknown key "${k}"; allowed: objects`);
  const oo = { ...origin, path: joinPath(origin.path, "objects") };
  if (!Array.isArray(top.objects) || top.objects.length === 0) throw userError(oo, `expected a non-empty list of spheres and cylinders, e.g. ${example}`);
  const objects: ChiObject[] = top.objects.map((r, i) => {
    const o = { ...oo, path: joinPath(oo.path, i) };
    const at = (k: string) => ({ ...o, path: joinPath(o.path, k) });
    const s = obj(r, o, `a sphere or cylinder`);
    const shape = s.shape;
    if (shape !== "sphere" && shape !== "cylinder") throw userError(at("shape"), `expected "sphere" or "cylinder", got ${JSON.stringify(shape)}`);
    const allowed = shape === "sphere" ? ["shape", "center", "radius", "deltaChi", "label"] : ["shape", "center", "radius", "direction", "deltaChi", "label"];
    for (const k of Object.keys(s)) if (!allowed.includes(k)) throw userError(at(k), `unknown key "${k}"; allowed for a ${shape}: ${allowed.join(", ")}`);
    if (!Array.isArray(s.center) || s.center.length !== 3) throw userError(at("center"), `expected ["x", "y", "z"] with units, e.g. ["0 cm", "0 cm", "0 cm"]`);
    const center = s.center.map((v, j) => quantity(v, "length", { ...at("center"), path: joinPath(at("center").path, j) })) as [number, number, number];
    if (s.radius === undefined) throw userError(at("radius"), `missing; a ${shape} needs a radius with units`);
    const radius = positive(s.radius, "length", at("radius"));
    if (s.deltaChi === undefined) throw userError(at("deltaChi"), `missing; give the susceptibility difference to the surroundings, e.g. "9.41 ppm"`);
    const deltaChi = parseChi(s.deltaChi, at("deltaChi"));
    if (shape === "sphere") return { shape, center, radius, deltaChi };
    let dir: [number, number, number];
    const d = s.direction ?? "z";
    if (typeof d === "string" && d in AXES) dir = AXES[d]!;
    else if (Array.isArray(d) && d.length === 3 && d.every((v) => typeof v === "number" && Number.isFinite(v))) {
      const n = Math.hypot(d[0] as number, d[1] as number, d[2] as number);
      if (!(n > 0)) throw userError(at("direction"), `the direction must not be the zero vector`);
      dir = [(d[0] as number) / n, (d[1] as number) / n, (d[2] as number) / n];
    } else throw userError(at("direction"), `expected "x", "y", "z" or a vector [dx, dy, dz], got ${JSON.stringify(d)}`);
    return { shape, center, radius, direction: dir, deltaChi };
  });
  const hzPerUnit = GAMMA_BAR * fieldT;
  return {
    fn: (x, y, z) => {
      let v = 0;
      for (const o of objects) v += chiFieldRatio(o, x, y, z);
      return v * hzPerUnit;
    },
    description: `susceptibility: ${objects.map((o) => `${o.shape} r=${(o.radius * 1e3).toFixed(1)} mm Δχ=${(o.deltaChi * 1e6).toFixed(2)} ppm`).join(", ")} in B0 = ${fieldT} T along z`,
  };
}
