/**
 * Phantom files (phantoms/NAME.json, keys in README.md and DEVELOPERS.md): read, validate
 * and compile into a Phantom with SI numbers. Every problem is a UserError
 * naming the file, the key path and what is allowed.
 *
 * Extensions of the contract (backwards compatible):
 *   - a shape may have a "label" string (shown in messages and reports);
 *   - cylinder "axis" may be left out and then is "z".
 */
import { joinPath, userError, type Origin } from "../errors.js";
import { describeValue, parseJsonStrict } from "../json.js";
import { KINDS, plainNumber, positive as positiveSI, quantity as quantitySI, type QuantityKind } from "../units.js";
import { parseB0, type RealArray } from "./b0.js";
import { makeShape, type Axis, type Shape, type ShapeSpec, type ShapeType } from "./shapes.js";
import { isLibraryTissue, libraryNames, libraryTissue } from "./tissues.js";
import type { FatModel, Phantom, Tissue } from "./types.js";

const TOP_KEYS = ["name", "description", "tissues", "shapes", "b0"];
const TISSUE_KEYS = ["pd", "t1", "t2", "t2star", "species", "fatFraction", "fatModel"];
const COMMON_SHAPE_KEYS = ["shape", "tissue", "center", "rotation", "label"];
const SHAPE_KEYS: Record<ShapeType, string[]> = {
  ellipse: ["semiAxes"],
  rectangle: ["size"],
  ellipsoid: ["semiAxes"],
  sphere: ["radius"],
  box: ["size"],
  cylinder: ["radius", "length", "axis"],
};
const SHAPE_TYPES = Object.keys(SHAPE_KEYS) as ShapeType[];
const SPECIES = ["water", "fat"];
const FAT_MODELS: FatModel[] = ["single", "multi"];
const AXES: Axis[] = ["x", "y", "z"];

/** Outside help a phantom may need: a reader for field-map (.npy) files. */
export interface PhantomLoadOptions {
  /** Reads the field-map array at a path (relative names are joined to the phantom file's folder first). */
  readArray?: (path: string) => RealArray;
}

/** JSON.parse with a UserError that says where (line, column) the text is broken; duplicate keys and deep nesting are errors too (json.ts). */
export function parseJsonText(text: string, file: string): unknown {
  return parseJsonStrict(text, file);
}

/**
 * Validates a parsed phantom file and compiles it (all values to SI, shapes
 * compiled, library tissues resolved at `fieldT` tesla, b0 compiled).
 * `file` is used in messages only.
 */
export function parsePhantom(json: unknown, file: string, fieldT: number, opts: PhantomLoadOptions = {}): Phantom {
  if (!(fieldT > 0) || !Number.isFinite(fieldT)) throw new RangeError(`parsePhantom: field strength must be a positive number of tesla, got ${fieldT}`);
  const root: Origin = { file, path: "" };
  const top = expectObject(json, root, "a phantom object with keys name, shapes and optionally description, tissues, b0");
  checkKeys(top, TOP_KEYS, root, "a phantom");

  const name = expectString(top.name, at(root, "name"), "the phantom name");
  const description = top.description === undefined ? "" : expectString(top.description, at(root, "description"), "a description", true);
  const warnings: string[] = [];

  // Inline tissues, in file order.
  const tissues: Tissue[] = [];
  const index = new Map<string, number>();
  const used = new Set<string>();
  if (top.tissues !== undefined) {
    const tOrigin = at(root, "tissues");
    const tObj = expectObject(top.tissues, tOrigin, `an object of named tissues, e.g. { "gel": { "pd": 1, "t1": "800 ms", "t2": "90 ms", "t2star": "45 ms", "species": "water" } }`);
    for (const [tName, raw] of Object.entries(tObj)) {
      const o = at(tOrigin, tName);
      if (tName.trim() === "") throw userError(o, "a tissue name must not be empty");
      tissues.push(parseTissue(tName, raw, o, warnings));
      index.set(tName, tissues.length - 1);
      if (isLibraryTissue(tName)) warnings.push(`tissue "${tName}" is defined in the file and hides the library tissue of that name`);
    }
  }
  const inlineNames = [...index.keys()];

  const resolveTissue = (raw: unknown, o: Origin): number => {
    const tName = expectString(raw, o, "a tissue name");
    used.add(tName);
    const have = index.get(tName);
    if (have !== undefined) return have;
    const lib = libraryTissue(tName, fieldT);
    if (!lib) {
      const known = [
        inlineNames.length ? `defined in this file: ${inlineNames.join(", ")}` : "none defined in this file",
        `library: ${libraryNames().join(", ")}`,
      ].join("; ");
      throw userError(o, `unknown tissue "${tName}"${suggest(tName, [...inlineNames, ...libraryNames()])}; known tissues are ${known}`);
    }
    tissues.push(lib.tissue);
    index.set(tName, tissues.length - 1);
    if (lib.warning && !warnings.includes(lib.warning)) warnings.push(lib.warning);
    return tissues.length - 1;
  };

  // Shapes, in painting order.
  const sOrigin = at(root, "shapes");
  if (top.shapes === undefined) throw userError(sOrigin, `missing; a phantom needs a list of shapes (${SHAPE_TYPES.join(", ")})`);
  if (!Array.isArray(top.shapes)) throw userError(sOrigin, `expected a list of shapes, got ${describe(top.shapes)}`);
  if (top.shapes.length === 0) throw userError(sOrigin, `the list is empty; a phantom needs at least one shape (${SHAPE_TYPES.join(", ")})`);
  const shapes: Shape[] = top.shapes.map((raw, i) => parseShape(raw, at(sOrigin, i), resolveTissue));

  for (const n of inlineNames) if (!used.has(n)) warnings.push(`tissue "${n}" is defined but no shape uses it`);

  let b0: Phantom["b0"] = null;
  let b0Description: string | null = null;
  if (top.b0 !== undefined) {
    const bOrigin = at(root, "b0");
    const model = parseB0(top.b0, bOrigin, { fieldT, baseDir: folderOf(file), readArray: opts.readArray });
    probeB0(model.fn, shapes);
    b0 = model.fn;
    b0Description = model.description;
  }

  return { name, description, file, fieldT, tissues, shapes, b0, b0Description, warnings };
}

function parseTissue(tName: string, raw: unknown, o: Origin, warnings: string[]): Tissue {
  const t = expectObject(raw, o, `a tissue: { "pd": 1, "t1": "800 ms", "t2": "90 ms", "t2star": "45 ms", "species": "water" }`);
  checkKeys(t, TISSUE_KEYS, o, "a tissue");
  for (const k of ["pd", "t1", "t2", "t2star"]) {
    if (t[k] === undefined) throw userError(at(o, k), `missing; a tissue needs pd (plain number 0..1), t1, t2, t2star (times with units) and species ("water" or "fat") or fatFraction (0..1)`);
  }
  const pd = plainNumber(t.pd, at(o, "pd"), { min: 0, max: 1 });
  const t1 = positive(t.t1, "time", at(o, "t1"));
  const t2 = positive(t.t2, "time", at(o, "t2"));
  const t2star = positive(t.t2star, "time", at(o, "t2star"));
  // One pool of spins has T2 ≤ 2·T1 (Traficante 1991, "Relaxation: can T2 be longer than T1?",
  // Concepts in Magnetic Resonance 3:171–177; from memory). T1 < T2 ≤ 2·T1 is allowed by that bound but
  // is not seen in tissue, where T2 < T1: a warning, not an error, so that such values can still be studied.
  if (t2 > 2 * t1) throw userError(at(o, "t2"), `T2 (${t.t2}) cannot exceed 2·T1 (${t.t1}); physically T2 ≤ 2·T1`);
  if (t2 > t1) warnings.push(`tissue "${tName}": T2 (${t.t2}) is longer than T1 (${t.t1}); allowed up to 2·T1 by the physics, but no tissue shows it (check the values)`);
  if (t2star > t2) throw userError(at(o, "t2star"), `T2* (${t.t2star}) cannot be longer than T2 (${t.t2})`);

  let fatFraction: number;
  if (t.fatFraction !== undefined) {
    fatFraction = plainNumber(t.fatFraction, at(o, "fatFraction"), { min: 0, max: 1 });
    if (t.species !== undefined) {
      expectEnum(t.species, SPECIES, at(o, "species"));
      warnings.push(`tissue "${tName}": species is ignored because fatFraction is given`);
    }
  } else {
    if (t.species === undefined) throw userError(at(o, "species"), `missing; give species ("water" or "fat") or fatFraction (0..1)`);
    fatFraction = expectEnum(t.species, SPECIES, at(o, "species")) === "fat" ? 1 : 0;
  }
  const tissue: Tissue = { name: tName, pd, t1, t2, t2star, fatFraction };
  if (t.fatModel !== undefined) tissue.fatModel = expectEnum(t.fatModel, FAT_MODELS, at(o, "fatModel")) as FatModel;
  return tissue;
}

function parseShape(raw: unknown, o: Origin, resolveTissue: (raw: unknown, o: Origin) => number): Shape {
  const s = expectObject(raw, o, `a shape object with "shape" (${SHAPE_TYPES.join(", ")}), "tissue", "center" and its sizes`);
  if (s.shape === undefined) throw userError(at(o, "shape"), `missing; one of ${SHAPE_TYPES.join(", ")}`);
  const type = expectEnum(s.shape, SHAPE_TYPES, at(o, "shape")) as ShapeType;
  checkKeys(s, [...COMMON_SHAPE_KEYS, ...SHAPE_KEYS[type]], o, `a ${type}`);
  const need = (k: string, what: string): unknown => {
    if (s[k] === undefined) throw userError(at(o, k), `missing; a ${type} needs ${what}`);
    return s[k];
  };

  const is2D = type === "ellipse" || type === "rectangle";
  const cRaw = need("center", is2D ? `a center ["x", "y"] or ["x", "y", "z"] with units` : `a center ["x", "y", "z"] with units`);
  const c = lengths(cRaw, at(o, "center"), is2D ? [2, 3] : [3], false, is2D ? `["0 cm", "0 cm"]` : `["0 cm", "0 cm", "0 cm"]`);
  const center: [number, number, number] = [c[0]!, c[1]!, c[2] ?? 0];
  const rotation = s.rotation === undefined ? 0 : quantity(s.rotation, "angle", at(o, "rotation"));
  const label = s.label === undefined ? undefined : expectString(s.label, at(o, "label"), "a label", true);
  const tissue = resolveTissue(need("tissue", "a tissue name"), at(o, "tissue"));

  const base = { tissue, center, rotation, ...(label !== undefined ? { label } : {}) };
  let spec: ShapeSpec;
  switch (type) {
    case "ellipse": {
      const a = lengths(need("semiAxes", `semiAxes ["a", "b"]`), at(o, "semiAxes"), [2], true, `["5 cm", "3 cm"]`);
      spec = { ...base, type, semiAxes: [a[0]!, a[1]!] };
      break;
    }
    case "rectangle": {
      const a = lengths(need("size", `size ["width", "height"]`), at(o, "size"), [2], true, `["4 cm", "2 cm"]`);
      spec = { ...base, type, size: [a[0]!, a[1]!] };
      break;
    }
    case "ellipsoid": {
      const a = lengths(need("semiAxes", `semiAxes ["a", "b", "c"]`), at(o, "semiAxes"), [3], true, `["5 cm", "3 cm", "2 cm"]`);
      spec = { ...base, type, semiAxes: [a[0]!, a[1]!, a[2]!] };
      break;
    }
    case "sphere":
      spec = { ...base, type, radius: positive(need("radius", "a radius"), "length", at(o, "radius")) };
      break;
    case "box": {
      const a = lengths(need("size", `size ["width", "height", "depth"]`), at(o, "size"), [3], true, `["4 cm", "4 cm", "10 cm"]`);
      spec = { ...base, type, size: [a[0]!, a[1]!, a[2]!] };
      break;
    }
    case "cylinder": {
      const radius = positive(need("radius", "a radius"), "length", at(o, "radius"));
      const length = positive(need("length", "a length"), "length", at(o, "length"));
      const axis = s.axis === undefined ? "z" : (expectEnum(s.axis, AXES, at(o, "axis")) as Axis);
      spec = { ...base, type, radius, length, axis };
      break;
    }
  }
  return makeShape(spec);
}

/**
 * Evaluates the b0 function over the phantom's bounding box (3×3×3 points;
 * z over ± the largest in-plane half-extent when the phantom is 2D) so that
 * an expression that fails somewhere is reported before any work starts.
 */
function probeB0(fn: (x: number, y: number, z: number) => number, shapes: Shape[]): void {
  const min = [Infinity, Infinity, Infinity], max = [-Infinity, -Infinity, -Infinity];
  for (const s of shapes) {
    const b = s.bounds();
    for (let i = 0; i < 3; i++) {
      min[i] = Math.min(min[i]!, b.min[i]!);
      max[i] = Math.max(max[i]!, b.max[i]!);
    }
  }
  if (!Number.isFinite(min[2]!) || !Number.isFinite(max[2]!)) {
    const r = Math.max(max[0]! - min[0]!, max[1]! - min[1]!) / 2;
    min[2] = -r;
    max[2] = r;
  }
  for (let i = 0; i < 3; i++) for (let j = 0; j < 3; j++) for (let k = 0; k < 3; k++) {
    fn(min[0]! + ((max[0]! - min[0]!) * i) / 2, min[1]! + ((max[1]! - min[1]!) * j) / 2, min[2]! + ((max[2]! - min[2]!) * k) / 2);
  }
}

// ---- small validators ----

/**
 * quantity()/positive() of units.ts, with a unit-less value ("5" or 5)
 * reported with an example of the right kind ("24 cm", not "5 ms").
 */
function quantity(raw: unknown, kind: QuantityKind, o: Origin): number {
  unitless(raw, kind, o);
  return quantitySI(raw, kind, o);
}

function positive(raw: unknown, kind: QuantityKind, o: Origin): number {
  unitless(raw, kind, o);
  return positiveSI(raw, kind, o);
}

function unitless(raw: unknown, kind: QuantityKind, o: Origin): void {
  const bare = typeof raw === "number" || (typeof raw === "string" && raw.trim() !== "" && Number.isFinite(Number(raw)));
  if (bare) throw userError(o, `${describe(raw)} has no units; write a ${kind} as a string with units, like ${KINDS[kind].example}`);
}

function at(o: Origin, key: string | number): Origin {
  return { ...o, path: joinPath(o.path === "" ? undefined : o.path, key) };
}

function expectObject(raw: unknown, o: Origin, what: string): Record<string, unknown> {
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    throw userError(o, `expected ${what}, got ${describe(raw)}`);
  }
  return raw as Record<string, unknown>;
}

function expectString(raw: unknown, o: Origin, what: string, allowEmpty = false): string {
  if (raw === undefined) throw userError(o, `missing; expected ${what} (a string)`);
  if (typeof raw !== "string" || (!allowEmpty && raw.trim() === "")) throw userError(o, `expected ${what} as a non-empty string, got ${describe(raw)}`);
  return raw;
}

function expectEnum(raw: unknown, allowed: readonly string[], o: Origin): string {
  if (typeof raw !== "string" || !allowed.includes(raw)) {
    throw userError(o, `${describe(raw)} is not allowed${typeof raw === "string" ? suggest(raw, allowed) : ""}; use one of ${allowed.map((a) => `"${a}"`).join(", ")}`);
  }
  return raw;
}

function checkKeys(obj: Record<string, unknown>, allowed: readonly string[], o: Origin, what: string): void {
  for (const k of Object.keys(obj)) {
    if (!allowed.includes(k)) {
      throw userError(at(o, k), `unknown key "${k}"${suggest(k, allowed)}; allowed keys for ${what}: ${allowed.join(", ")}`);
    }
  }
}

/** A list of lengths with units, e.g. ["3 cm", "0 cm"]; positive ones if asked. */
function lengths(raw: unknown, o: Origin, counts: number[], mustBePositive: boolean, example: string): number[] {
  if (!Array.isArray(raw) || !counts.includes(raw.length)) {
    throw userError(o, `expected a list of ${counts.join(" or ")} lengths with units like ${example}, got ${describe(raw)}`);
  }
  return raw.map((v, i) => (mustBePositive ? positive(v, "length", at(o, i)) : quantity(v, "length", at(o, i))));
}

function describe(raw: unknown): string {
  return describeValue(raw);
}

/** ` (did you mean "x"?)` for a close match, else "". */
function suggest(word: string, options: readonly string[]): string {
  let best = "", bestD = Infinity;
  for (const opt of options) {
    const d = editDistance(word.toLowerCase(), opt.toLowerCase());
    if (d < bestD) { bestD = d; best = opt; }
  }
  return best !== word && bestD <= Math.max(1, Math.floor(word.length / 3)) ? ` (did you mean "${best}"?)` : "";
}

function editDistance(a: string, b: string): number {
  let prev = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    const cur = [i];
    for (let j = 1; j <= b.length; j++) {
      cur[j] = Math.min(prev[j]! + 1, cur[j - 1]! + 1, prev[j - 1]! + (a[i - 1] === b[j - 1] ? 0 : 1));
    }
    prev = cur;
  }
  return prev[b.length]!;
}

/** The folder part of a path ("." for a bare name); no file system involved. */
export function folderOf(file: string): string {
  const k = file.lastIndexOf("/");
  return k < 0 ? "." : k === 0 ? "/" : file.slice(0, k);
}
