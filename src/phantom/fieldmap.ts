/**
 * Field-map files: a real .npy array of off-resonance in Hz on a regular grid,
 * `{ "file": "map.npy", "origin": ["-12 cm", "-12 cm", "0 cm"],
 *    "spacing": ["1 mm", "1 mm", "1 mm"] }`.
 * Shape [nz, ny, nx] (C order, x fastest) or [ny, nx] (the same at every z).
 * Element [k, j, i] sits at origin + (i·dx, j·dy, k·dz). Between elements the
 * map is interpolated (tri)linearly; outside the grid the nearest edge value
 * holds. The phantom stage does not decode .npy itself: the caller passes a
 * reader in B0Context (the CLI passes io's decodeNpy), so stages stay in order.
 */
import { joinPath, userError, type Origin } from "../errors.js";
import { quantity, positive } from "../units.js";
import type { B0Context, B0Model, RealArray } from "./b0.js";

/** A field-map sampler: Hz at (x, y, z) m by trilinear interpolation, edges clamped. */
export function fieldMapSampler(arr: RealArray, origin: [number, number, number], spacing: [number, number, number]): (x: number, y: number, z: number) => number {
  const sh = arr.shape.length === 2 ? [1, arr.shape[0]!, arr.shape[1]!] : arr.shape;
  const nz = sh[0]!, ny = sh[1]!, nx = sh[2]!;
  const data = Float64Array.from(arr.data);
  const coord = (v: number, o: number, d: number, n: number): [number, number, number] => {
    let t = (v - o) / d;
    if (!(t > 0)) t = 0;
    if (t > n - 1) t = n - 1;
    const i0 = Math.min(Math.floor(t), Math.max(0, n - 2));
    const i1 = Math.min(i0 + 1, n - 1);
    return [i0, i1, t - i0];
  };
  return (x, y, z) => {
    const [x0, x1, fx] = coord(x, origin[0], spacing[0], nx);
    const [y0, y1, fy] = coord(y, origin[1], spacing[1], ny);
    const [z0, z1, fz] = nz === 1 ? [0, 0, 0] : coord(z, origin[2], spacing[2], nz);
    const at = (k: number, j: number, i: number) => data[(k * ny + j) * nx + i]!;
    const c00 = at(z0, y0, x0) * (1 - fx) + at(z0, y0, x1) * fx;
    const c01 = at(z0, y1, x0) * (1 - fx) + at(z0, y1, x1) * fx;
    const c10 = at(z1, y0, x0) * (1 - fx) + at(z1, y0, x1) * fx;
    const c11 = at(z1, y1, x0) * (1 - fx) + at(z1, y1, x1) * fx;
    const c0 = c00 * (1 - fy) + c01 * fy, c1 = c10 * (1 - fy) + c11 * fy;
    return c0 * (1 - fz) + c1 * fz;
  };
}

function vec3(raw: unknown, o: Origin, pos: boolean): [number, number, number] {
  if (!Array.isArray(raw) || raw.length !== 3) throw userError(o, `expected three lengths with units, e.g. ["1 mm", "1 mm", "1 mm"], got ${JSON.stringify(raw)}`);
  return raw.map((v, i) => (pos ? positive : quantity)(v, "length", { ...o, path: joinPath(o.path, i) })) as [number, number, number];
}

/** Parses and loads a field map (see the file comment). */
export function parseFieldMap(raw: unknown, origin: Origin, ctx: B0Context): B0Model {
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    throw userError(origin, `expected { "file": "map.npy", "origin": ["-12 cm", "-12 cm", "0 cm"], "spacing": ["1 mm", "1 mm", "1 mm"] } (values in Hz)`);
  }
  const m = raw as Record<string, unknown>;
  const at = (k: string) => ({ ...origin, path: joinPath(origin.path, k) });
  for (const k of Object.keys(m)) if (!["file", "origin", "spacing"].includes(k)) throw userError(at(k), `unknown key "${k}"; allowed: file, origin, spacing`);
  if (typeof m.file !== "string" || m.file.trim() === "") throw userError(at("file"), `expected the name of a .npy file of Hz values (relative to the phantom file)`);
  if (m.origin === undefined) throw userError(at("origin"), `missing; the position of element [0, 0, 0], e.g. ["-12 cm", "-12 cm", "0 cm"]`);
  if (m.spacing === undefined) throw userError(at("spacing"), `missing; the grid spacing along x, y, z, e.g. ["1 mm", "1 mm", "1 mm"]`);
  const org = vec3(m.origin, at("origin"), false);
  const spacing = vec3(m.spacing, at("spacing"), true);
  if (!ctx.readArray) throw new Error("parseFieldMap: no .npy reader was passed in B0Context");
  const path = m.file.startsWith("/") ? m.file : joinFolder(ctx.baseDir, m.file);
  let arr: RealArray;
  try {
    arr = ctx.readArray(path);
  } catch (e) {
    throw userError(at("file"), `cannot use ${path}: ${(e as Error).message}`);
  }
  if (arr.shape.length !== 2 && arr.shape.length !== 3) throw userError(at("file"), `the array has shape [${arr.shape.join(", ")}]; expected [nz, ny, nx] or [ny, nx]`);
  if (arr.shape.some((n) => n < 1)) throw userError(at("file"), `the array is empty (shape [${arr.shape.join(", ")}])`);
  for (let i = 0; i < arr.data.length; i++) {
    if (!Number.isFinite(arr.data[i]!)) throw userError(at("file"), `element ${i} is ${arr.data[i]}; a field map must hold finite Hz values`);
  }
  return {
    fn: fieldMapSampler(arr, org, spacing),
    description: `field map ${m.file} [${arr.shape.join("×")}] (Hz), spacing ${spacing.map((s) => (s * 1e3).toFixed(2)).join("×")} mm`,
  };
}

/** `name` relative to `folder`, with "." and ".." steps folded; no file system involved. */
export function joinFolder(folder: string, name: string): string {
  const parts: string[] = [];
  const abs = folder.startsWith("/");
  for (const p of `${folder}/${name}`.split("/")) {
    if (p === "" || p === ".") continue;
    if (p === ".." && parts.length > 0 && parts[parts.length - 1] !== "..") parts.pop();
    else if (p !== ".." || !abs) parts.push(p);
  }
  return (abs ? "/" : "") + (parts.join("/") || (abs ? "" : "."));
}
