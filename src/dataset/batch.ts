/**
 * Batches: seeded perturbations of the phantom per case (--vary), the
 * manifest (manifest.jsonl: one JSON line per case with its parameters and
 * the sha256 of every file), and resume: a case whose manifest line has the
 * same batch key and whose files all exist with the listed checksums is
 * skipped. Files are read and written by io/dataset-folder.ts (Node); this
 * module holds what needs no file system: perturbations, manifest lines,
 * and the check that joins the parts of a batch.
 *
 * Perturbations, drawn per case from its own stream (prng.ts), each uniform
 * on the stated range; a range of 0 leaves the value as it is:
 *   position=L   whole object shifted by (dx, dy), each in [−L, L]
 *   rotation=A   whole object rotated about the z axis through the origin by θ ∈ [−A, A]
 *   size=F       each shape's sizes (radius, semi-axes, size, length) × (1 + f), f ∈ [−F, F], one f per shape
 *   t1=F, t2=F, pd=F   each tissue's T1, T2 (T2* with it), PD × (1 + f), f ∈ [−F, F] per tissue;
 *                T2 is then capped at 2·T1 and T2* at T2
 *   b0=H         adds f0 + gx·x + gy·y (Hz, x and y in m) to the B0 map, with f0, gx·0.1 m and gy·0.1 m each in [−H, H]
 */
import { UserError } from "../errors.js";
import { makeShape, type Phantom, type Shape, type ShapeSpec } from "../phantom/index.js";
import { quantity } from "../units.js";
import type { Rng } from "./prng.js";

export interface VarySpec {
  /** m */ position: number;
  /** rad */ rotation: number;
  /** fractions */ size: number; t1: number; t2: number; pd: number;
  /** Hz */ b0: number;
}

export const VARY_KEYS = ["position", "rotation", "size", "t1", "t2", "pd", "b0"] as const;

export function noVary(): VarySpec {
  return { position: 0, rotation: 0, size: 0, t1: 0, t2: 0, pd: 0, b0: 0 };
}

function fraction(raw: string, key: string): number {
  const m = /^\s*([0-9.eE+-]+)\s*(%?)\s*$/.exec(raw);
  const v = m ? Number(m[1]) / (m[2] ? 100 : 1) : NaN;
  if (!Number.isFinite(v) || v < 0 || v >= 1) throw new UserError(`${key}=${raw}: expected a fraction from 0 to below 1 such as 0.1 or 10%`, undefined, "--vary");
  return v;
}

/** Parses --vary items "key=value[,key=value…]" (see file header). */
export function parseVary(items: string[]): VarySpec {
  const v = noVary();
  for (const item of items.flatMap((s) => s.split(",")).map((s) => s.trim()).filter((s) => s !== "")) {
    const eq = item.indexOf("=");
    const key = eq < 0 ? item : item.slice(0, eq).trim();
    const raw = eq < 0 ? "" : item.slice(eq + 1).trim().replace(/^["']|["']$/g, "");
    if (!(VARY_KEYS as readonly string[]).includes(key) || raw === "") {
      throw new UserError(`"${item}" is not understood; write key=value with key one of ${VARY_KEYS.join(", ")}, e.g. position="1 cm",rotation="10 deg",size=10%,t1=10%,b0="20 Hz"`, undefined, "--vary");
    }
    const origin = { path: `--vary ${key}` };
    const num = (kind: "length" | "angle" | "frequency") => {
      const x = quantity(raw.replace(/^(-?[0-9.eE+]+)([a-zA-Z])/, "$1 $2"), kind, origin);
      if (!(x >= 0)) throw new UserError(`${key}=${raw}: the range must not be negative`, undefined, "--vary");
      return x;
    };
    if (key === "position") v.position = num("length");
    else if (key === "rotation") v.rotation = num("angle");
    else if (key === "b0") v.b0 = num("frequency");
    else v[key as "size" | "t1" | "t2" | "pd"] = fraction(raw, key);
  }
  return v;
}

/** The values drawn for one case. */
export interface Perturbation {
  /** m */ shift: [number, number];
  /** rad */ rotation: number;
  sizeFactor: number[];
  t1Factor: number[];
  t2Factor: number[];
  pdFactor: number[];
  /** Hz, Hz/m, Hz/m */ b0: { f0: number; gx: number; gy: number };
}

/** Draws a perturbation in a fixed order (all values drawn even for zero ranges). */
export function drawPerturbation(v: VarySpec, ph: Phantom, rng: Rng): Perturbation {
  const u = (r: number) => rng.between(-r, r);
  const shift: [number, number] = [u(v.position), u(v.position)];
  const rotation = u(v.rotation);
  const sizeFactor = ph.shapes.map(() => 1 + u(v.size));
  const t1Factor = ph.tissues.map(() => 1 + u(v.t1));
  const t2Factor = ph.tissues.map(() => 1 + u(v.t2));
  const pdFactor = ph.tissues.map(() => 1 + u(v.pd));
  const b0 = { f0: u(v.b0), gx: u(v.b0) / 0.1, gy: u(v.b0) / 0.1 };
  return { shift, rotation, sizeFactor, t1Factor, t2Factor, pdFactor, b0 };
}

function scaledSpec(s: ShapeSpec, f: number, center: [number, number, number], rotation: number): ShapeSpec {
  const base = { tissue: s.tissue, center, rotation, ...(s.label !== undefined ? { label: s.label } : {}) };
  switch (s.type) {
    case "ellipse": return { ...base, type: s.type, semiAxes: [s.semiAxes[0] * f, s.semiAxes[1] * f] };
    case "rectangle": return { ...base, type: s.type, size: [s.size[0] * f, s.size[1] * f] };
    case "ellipsoid": return { ...base, type: s.type, semiAxes: [s.semiAxes[0] * f, s.semiAxes[1] * f, s.semiAxes[2] * f] };
    case "sphere": return { ...base, type: s.type, radius: s.radius * f };
    case "box": return { ...base, type: s.type, size: [s.size[0] * f, s.size[1] * f, s.size[2] * f] };
    case "cylinder": return { ...base, type: s.type, radius: s.radius * f, length: s.length * f, axis: s.axis };
  }
}

/** A new phantom with the perturbation applied (the input is not changed). */
export function applyPerturbation(ph: Phantom, p: Perturbation): Phantom {
  const c = Math.cos(p.rotation), s = Math.sin(p.rotation);
  const shapes: Shape[] = ph.shapes.map((sh, i) => {
    const [x, y, z] = sh.spec.center;
    const center: [number, number, number] = [c * x - s * y + p.shift[0], s * x + c * y + p.shift[1], z];
    return makeShape(scaledSpec(sh.spec, p.sizeFactor[i]!, center, (sh.spec.rotation ?? 0) + p.rotation));
  });
  const tissues = ph.tissues.map((t, i) => {
    const t1 = t.t1 * p.t1Factor[i]!;
    const t2 = Math.min(t.t2 * p.t2Factor[i]!, 2 * t1);
    const t2star = Math.min(t.t2star * p.t2Factor[i]!, t2);
    return { ...t, t1, t2, t2star, pd: t.pd * p.pdFactor[i]! };
  });
  const { f0, gx, gy } = p.b0;
  const orig = ph.b0;
  const linear = f0 !== 0 || gx !== 0 || gy !== 0;
  const b0 = !linear ? orig : orig ? (x: number, y: number, z: number) => orig(x, y, z) + f0 + gx * x + gy * y : (x: number, y: number) => f0 + gx * x + gy * y;
  const b0Description = linear ? `${ph.b0Description ?? "0"} + ${f0.toFixed(3)} Hz + ${gx.toFixed(3)} Hz/m·x + ${gy.toFixed(3)} Hz/m·y` : ph.b0Description;
  return { ...ph, shapes, tissues, b0, b0Description };
}

// ---- manifest lines and the parts of a batch (no file system) ----

export interface ManifestEntry {
  case: number;
  dir: string;
  /** sha256 of the batch-wide settings plus the case index: a case is reused only under the same key. */
  key: string;
  seed: number;
  params: Record<string, unknown>;
  /** file name → sha256 (hex). */
  files: Record<string, string>;
  /** sha256 of the batch-wide settings (without the case index), and the batch size: parts of one batch share both. */
  batch?: string;
  count?: number;
}

/** The files and parameters of one case, as makeCase returns them. */
export interface CaseFiles {
  files: Map<string, Uint8Array | string>;
  params: Record<string, unknown>;
}

export function caseDirName(i: number): string {
  return `case-${String(i).padStart(4, "0")}`;
}

/** Manifest file of a batch (all cases) or of the part with cases A … B−1 (`--cases A:B`). */
export function manifestName(range?: [number, number]): string {
  return range ? `manifest-${range[0]}-${range[1]}.jsonl` : "manifest.jsonl";
}

/** The part range of a manifest file name (manifest-A-B.jsonl), or null. */
export function partRange(name: string): [number, number] | null {
  const m = /^manifest-(\d+)-(\d+)\.jsonl$/.exec(name);
  return m ? [Number(m[1]), Number(m[2])] : null;
}

/** Manifest entries of a manifest file's text (one JSON line per case); a damaged line is left out (that case is redone). */
export function parseManifest(text: string): Map<number, ManifestEntry> {
  const m = new Map<number, ManifestEntry>();
  for (const line of text.split("\n")) {
    if (line.trim() === "") continue;
    try {
      const e = JSON.parse(line) as ManifestEntry;
      if (Number.isInteger(e.case) && typeof e.dir === "string" && e.files) m.set(e.case, e);
    } catch {
      /* a damaged line: that case is redone */
    }
  }
  return m;
}

/** The text of a manifest file: entries in case order, one JSON line each. */
export function manifestText(entries: Map<number, ManifestEntry>): string {
  return [...entries.values()].sort((a, b) => a.case - b.case).map((e) => JSON.stringify(e)).join("\n") + "\n";
}

/** One part of a batch as read from its manifest-A-B.jsonl. */
export interface DatasetPart {
  file: string;
  from: number;
  to: number;
  entries: Map<number, ManifestEntry>;
}

/**
 * Joins the parts of one batch (made with --cases A:B) into the entries of
 * manifest.jsonl. Refuses with a UserError, naming `where`: no parts; parts
 * of other batches (settings hash or batch size differ); overlapping ranges;
 * gaps (cases 0 … count−1 not all covered); a part that lacks cases of its
 * range (not finished: run it again); a case for which `verify` (its files
 * exist with the listed checksums) is false.
 */
export function joinDatasetParts(parts: DatasetPart[], verify: (e: ManifestEntry) => boolean, where: string): { entries: Map<number, ManifestEntry>; count: number } {
  const sorted = [...parts].sort((a, b) => a.from - b.from || a.to - b.to);
  if (sorted.length === 0) throw new UserError(`${where} holds no part manifests (manifest-A-B.jsonl, written by isofold dataset --cases A:B)`, undefined, "dataset-merge");
  const all = new Map<number, ManifestEntry>();
  let batch: string | undefined, count: number | undefined, first = "";
  let at = 0;
  for (const p of sorted) {
    const m = p.entries;
    for (const e of m.values()) {
      if (e.batch === undefined || e.count === undefined) throw new UserError(`${p.file}: case ${e.case} has no batch settings; make the part again with this version of isofold`, undefined, "dataset-merge");
      if (batch === undefined) { batch = e.batch; count = e.count; first = p.file; }
      if (e.batch !== batch || e.count !== count) {
        throw new UserError(`${p.file} was made with other settings than ${first} (seed, protocol, phantom, coils, noise, mask, format, readout, --count or version differ); merge only the parts of one batch`, undefined, "dataset-merge");
      }
      if (e.case < p.from || e.case >= p.to) throw new UserError(`${p.file} lists case ${e.case}, outside its range ${p.from}:${p.to}`, undefined, "dataset-merge");
    }
    if (p.from < at) throw new UserError(`${p.file} (cases ${p.from}–${p.to - 1}) overlaps another part that covers up to case ${at - 1}; remove one of them`, undefined, "dataset-merge");
    if (p.from > at) throw new UserError(`${casesAre(at, p.from - 1)} missing: no part covers ${p.from - 1 === at ? "it" : "them"}; run isofold dataset … --cases ${at}:${p.from}`, undefined, "dataset-merge");
    for (let i = p.from; i < p.to; i++) {
      const e = m.get(i);
      if (!e) throw new UserError(`${p.file} lacks case ${i}: that part did not finish; run it again with --cases ${p.from}:${p.to}`, undefined, "dataset-merge");
      if (!verify(e)) throw new UserError(`the files of case ${i} (${e.dir}) are missing or do not match their checksums in ${p.file}; run isofold dataset … --cases ${p.from}:${p.to} again`, undefined, "dataset-merge");
      all.set(i, e);
    }
    at = p.to;
  }
  if (count === undefined) throw new UserError(`the part manifests in ${where} are empty; run the parts first`, undefined, "dataset-merge");
  if (at !== count) throw new UserError(`${casesAre(at, count - 1)} missing (of ${count}): run isofold dataset … --cases ${at}:${count}`, undefined, "dataset-merge");
  return { entries: all, count };
}

/** "case 3 is" or "cases 3–5 are", for the merge messages. */
function casesAre(a: number, b: number): string {
  return a === b ? `case ${a} is` : `cases ${a}–${b} are`;
}
