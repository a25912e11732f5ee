/**
 * Reads a protocol file (JSON, every value with units), applies `extend`
 * (a bundled preset name or a relative path) and `--set key=value`
 * overrides, validates every key, and returns the normalized Protocol in SI.
 */
import { UserError, userError, joinPath, type Origin } from "../errors.js";
import { checkJsonStructure, parseJsonStrict } from "../json.js";
import { quantity, positive, nonNegative, plainNumber, parseUnit, isKind } from "../units.js";
import { FAT_SINGLE_PPM, GAMMA_BAR } from "../constants.js";
import { SEQUENCE_DEFINITIONS, sequenceDefinition } from "../sequence/registry.js";
import type {
  Protocol, PulseSpec, SequenceKind, Orientation, PhysicalAxis, SliceOrder, PartialFourierRecon, EchoOrder,
} from "./types.js";

type Json = null | boolean | number | string | Json[] | { [k: string]: Json };
type Obj = { [k: string]: Json };

/**
 * Where `extend` names are looked up: the protocol object a name stands for
 * (a bundled preset, or a file relative to `from`) and the source name it is
 * reported under, or null. The command line reads files (cli/inputs.ts); a
 * web page may look names up in its own table.
 */
export type ProtocolResolver = (name: string, from: string) => { source: string; json: unknown } | null;

/** What parseProtocol needs besides the object. */
export interface ProtocolInput {
  /** Name of the object in messages (a file path or a preset name); default "protocol". */
  source?: string;
  /** `key.path=value` overrides applied after `extend`, in order (the CLI's --set). */
  sets?: string[];
  /** Resolves `extend`; without one a protocol that extends another is refused. */
  resolve?: ProtocolResolver;
  /** Preset names offered in the message when `extend` names nothing. */
  presets?: string[];
}

function isObj(v: Json | undefined): v is Obj {
  return typeof v === "object" && v !== null && !Array.isArray(v);
}

/** Sets an own property, also for the key "__proto__" (plain assignment would change the prototype instead). */
function setOwn(o: Obj, k: string, v: Json): void {
  Object.defineProperty(o, k, { value: v, enumerable: true, writable: true, configurable: true });
}

function ownValue(o: Obj, k: string): Json | undefined {
  return Object.prototype.hasOwnProperty.call(o, k) ? o[k] : undefined;
}

function deepMerge(base: Obj, over: Obj): Obj {
  const out: Obj = { ...base };
  for (const [k, v] of Object.entries(over)) {
    const b = ownValue(out, k);
    setOwn(out, k, isObj(b) && isObj(v) ? deepMerge(b, v) : v);
  }
  return out;
}

/** Resolves the `extend` chain of a protocol object into one merged object. */
function mergeExtends(json: unknown, file: string, o: ProtocolInput, seen: Set<string> = new Set()): Obj {
  if (!isObj(json as Json)) throw new UserError("a protocol file must hold a JSON object", file);
  const obj = json as Obj;
  const ext = obj["extend"];
  if (ext === undefined) return obj;
  if (typeof ext !== "string") throw new UserError(`must name a preset or a file, got ${JSON.stringify(ext)}`, file, "extend");
  const target = o.resolve ? o.resolve(ext, file) : null;
  if (!target) {
    throw new UserError(`no preset or file named ${JSON.stringify(ext)}; presets: ${(o.presets ?? []).join(", ")}`, file, "extend");
  }
  if (seen.has(target.source)) throw new UserError(`extends itself through ${target.source}`, file, "extend");
  seen.add(target.source);
  const base = mergeExtends(target.json, target.source, o, seen);
  const { extend: _drop, ...rest } = obj;
  return deepMerge(base, rest);
}

/** Applies one `key.path=value` override; the value is JSON if it parses, else a string. */
function applySet(obj: Obj, assignment: string): Obj {
  const eq = assignment.indexOf("=");
  if (eq <= 0) throw new UserError(`--set expects key=value (e.g. fov.phase="16 cm"), got ${JSON.stringify(assignment)}`);
  const key = assignment.slice(0, eq).trim();
  const path = key.split(".");
  if (path.some((k) => k.trim() === "")) throw new UserError(`--set ${key}: a key path is names joined by dots, e.g. fov.phase="16 cm"`);
  const raw = assignment.slice(eq + 1).trim();
  let value: Json;
  let parsed = true;
  try {
    value = JSON.parse(raw) as Json;
  } catch {
    parsed = false;
    value = raw.replace(/^["']|["']$/g, "");
  }
  if (parsed) checkJsonStructure(raw, `--set ${key}`);
  const out = deepMerge(obj, {});
  let cur: Obj = out;
  for (let i = 0; i < path.length - 1; i++) {
    const k = path[i]!;
    const next = ownValue(cur, k);
    setOwn(cur, k, isObj(next) ? deepMerge(next, {}) : {});
    cur = ownValue(cur, k) as Obj;
  }
  setOwn(cur, path[path.length - 1]!, value);
  return out;
}

const TOP_KEYS = [
  "extend", "name", "description", "sequence", "field", "fov", "matrix", "slice", "phaseDirection",
  "bandwidth", "te", "tr", "flip", "refocusFlip", "oversampling", "receiverFilter", "hardware",
  "excitation", "refocusing", "spoiling", "rfSpoilIncrement", "dummyScans", "phaseOrder", "averages",
  "crusherCycles", "spoilerCycles", "shim", "slices", "readoutPolarity", "partialFourier", "ssfpPreparation",
  "echoTrainLength", "echoSpacing", "echoOrder", "shots", "epiEcho",
] as const;

/** Sequence names a protocol may use, with what each is. */
export const SEQUENCES: Record<SequenceKind, string> = Object.fromEntries(SEQUENCE_DEFINITIONS.map((d) => [d.name, d.description]));

function checkKeys(obj: Obj, allowed: readonly string[], origin: Origin): void {
  for (const k of Object.keys(obj)) {
    if (!allowed.includes(k)) {
      throw userError({ file: origin.file, path: joinPath(origin.path, k) }, `unknown key; allowed here: ${allowed.join(", ")}`);
    }
  }
}

function sub(obj: Obj, key: string, origin: Origin, required = true): Obj | undefined {
  const v = obj[key];
  const o = { file: origin.file, path: joinPath(origin.path, key) };
  if (v === undefined) {
    if (required) throw userError(o, "is required");
    return undefined;
  }
  if (!isObj(v)) throw userError(o, `must be an object, got ${JSON.stringify(v)}`);
  return v;
}

function oneOf<T extends string>(v: Json | undefined, allowed: readonly T[], origin: Origin, dflt?: T): T {
  if (v === undefined) {
    if (dflt !== undefined) return dflt;
    throw userError(origin, `is required; one of ${allowed.join(", ")}`);
  }
  if (typeof v !== "string" || !allowed.includes(v as T)) {
    throw userError(origin, `must be one of ${allowed.join(", ")}, got ${JSON.stringify(v)}`);
  }
  return v as T;
}

/** Fat–water shift used to convert a bandwidth given as a fat shift in pixels: main methylene peak,
 *  −3.4 ppm relative to water (Hamilton et al. 2011, NMR Biomed 24:784). */
export const FAT_SHIFT_PPM_FOR_BANDWIDTH = -FAT_SINGLE_PPM;

/**
 * Reads the bandwidth in any of four conventions and returns Hz per pixel:
 * "250 Hz/px" (per pixel), "64 kHz" (total, = N_read·BW_px), "±32 kHz" (half of the total),
 * "1.4 px" (target fat–water shift in pixels at the protocol's field).
 */
export function parseBandwidth(raw: Json | undefined, nRead: number, fieldT: number, origin: Origin): number {
  if (typeof raw !== "string") {
    throw userError(origin, `expected a bandwidth string like "250 Hz/px", "64 kHz", "±32 kHz" or "1.4 px"`);
  }
  let s = raw.trim();
  let half = false;
  if (s.startsWith("±") || s.startsWith("+-") || s.startsWith("+/-")) {
    half = true;
    s = s.replace(/^(±|\+-|\+\/-)\s*/, "");
  }
  const u = parseUnit(s, origin);
  let bwPx: number;
  if (isKind(u, "pixelBandwidth")) bwPx = u.toNumber("Hz/px");
  else if (isKind(u, "frequency")) bwPx = (u.toNumber("Hz") * (half ? 2 : 1)) / nRead;
  else if (isKind(u, "pixels")) {
    const px = u.toNumber("px");
    if (!(px > 0)) throw userError(origin, `a fat shift must be greater than 0 px, got ${raw}`);
    bwPx = (FAT_SHIFT_PPM_FOR_BANDWIDTH * 1e-6 * GAMMA_BAR * fieldT) / px;
  } else {
    throw userError(origin, `${JSON.stringify(raw)} is not a bandwidth; write "250 Hz/px", "64 kHz", "±32 kHz" or "1.4 px" (fat shift)`);
  }
  if (half && !isKind(u, "frequency")) throw userError(origin, `"±" applies only to a total bandwidth in Hz or kHz`);
  if (!(bwPx > 0) || !Number.isFinite(bwPx)) throw userError(origin, `bandwidth must be greater than zero, got ${raw}`);
  return bwPx;
}

function pulse(obj: Obj | undefined, origin: Origin, dflt: PulseSpec): PulseSpec {
  if (!obj) return dflt;
  checkKeys(obj, ["shape", "duration", "tbw", "steps"], origin);
  const at = (k: string) => ({ file: origin.file, path: joinPath(origin.path, k) });
  return {
    shape: oneOf(obj["shape"], ["sinc", "hard"] as const, at("shape"), dflt.shape),
    duration: obj["duration"] === undefined ? dflt.duration : positive(obj["duration"], "time", at("duration")),
    tbw: obj["tbw"] === undefined ? dflt.tbw : plainNumber(obj["tbw"], at("tbw"), { min: 1, max: 20 }),
    steps: obj["steps"] === undefined ? dflt.steps : plainNumber(obj["steps"], at("steps"), { min: 1, max: 100000, integer: true }),
  };
}

/**
 * Every default of an optional protocol key, in SI, for a sequence (flip
 * angle and echo train length come from the sequence's own declaration).
 * The one place protocol defaults live.
 */
export function protocolDefaults(sequence: SequenceKind) {
  const def = sequenceDefinition(sequence);
  return {
    orientation: "axial" as Orientation, tiltAxis: "read" as const, sliceCount: 1, sliceGap: 0, sliceOrder: "interleaved" as SliceOrder,
    bandwidth: "250 Hz/px", flip: def.defaults.flip, refocusFlip: Math.PI,
    oversampling: { read: 2, phase: 0 }, readoutPolarity: "positive" as const,
    partialFourier: { phase: 1, read: 1, method: "homodyne" as PartialFourierRecon },
    receiverFilter: true, hardware: { gmax: 0.04, slew: 150 },
    excitation: { shape: "sinc", duration: 2e-3, tbw: 4, steps: 200 } as PulseSpec,
    refocusing: { shape: "sinc", duration: 3e-3, tbw: 4, steps: 200 } as PulseSpec,
    spoiling: "ideal" as const, rfSpoilIncrement: (117 * Math.PI) / 180, dummyScans: 0, phaseOrder: "linear" as const, averages: 1,
    ssfpPreparation: "half-alpha" as const, echoTrainLength: def.defaults.echoTrainLength, echoSpacing: 0, echoOrder: "linear" as EchoOrder,
    shots: 1, epiEcho: "gradient" as const, crusherCycles: 4, spoilerCycles: 4, shim: 0,
  };
}

/**
 * A flip angle: greater than 0 and at most 180 deg. Above 180 deg the
 * rotation equals one of 360 deg minus the angle about the opposite axis
 * (a rotation's angle is defined modulo 360 deg), so the value is rejected
 * rather than reinterpreted: the user says which one is meant.
 */
function flipAngle(raw: Json | undefined, o: Origin): number {
  const v = positive(raw, "angle", o);
  if (v > Math.PI * (1 + 1e-12)) {
    const deg = (v * 180) / Math.PI;
    const alt = 360 - (((deg % 360) + 360) % 360);
    throw userError(o, `${String(raw)} is above 180 deg; give a flip angle from above 0 to 180 deg${alt > 0 && alt < 180 ? ` (${Number(alt.toPrecision(6))} deg is the same rotation about the opposite axis)` : ""}`);
  }
  return v;
}

/**
 * Protocol object (as read from a protocol file) → Protocol in SI: applies
 * `extend` through `o.resolve`, then the `--set`-style overrides `o.sets`,
 * then validates every key. Reads no file. Throws UserError naming the
 * source and key path on any bad value (a bad value that came from a set is
 * named as `--set key`).
 */
export function parseProtocol(json: unknown, o: ProtocolInput = {}): Protocol {
  const source = o.source ?? "protocol";
  const sets = o.sets ?? [];
  let obj = mergeExtends(json, source, o);
  for (const s of sets) obj = applySet(obj, s);
  try {
    return parseProtocolObject(obj, source);
  } catch (e) {
    // a bad value that came from --set is named as such, not as the file's
    const keys = sets.map((s) => s.slice(0, Math.max(0, s.indexOf("="))).trim());
    if (e instanceof UserError && e.keyPath && keys.some((k) => e.keyPath === k || e.keyPath!.startsWith(`${k}.`))) {
      throw new UserError(e.detail, `--set ${e.keyPath}`);
    }
    throw e;
  }
}

export function parseProtocolObject(obj: Obj, file: string): Protocol {
  const root: Origin = { file, path: "" };
  const at = (p: string) => ({ file, path: p });
  checkKeys(obj, TOP_KEYS, root);
  const warnings: string[] = [];

  const sequence = oneOf<SequenceKind>(obj["sequence"], SEQUENCE_DEFINITIONS.map((d) => d.name), at("sequence"));
  const def = sequenceDefinition(sequence);
  const D = protocolDefaults(sequence);
  const field = positive(obj["field"], "field", at("field"));
  const fovO = sub(obj, "fov", root)!;
  checkKeys(fovO, ["read", "phase"], at("fov"));
  const fovRead = positive(fovO["read"], "length", at("fov.read"));
  const fovPhase = fovO["phase"] === undefined ? fovRead : positive(fovO["phase"], "length", at("fov.phase"));
  const matO = sub(obj, "matrix", root)!;
  checkKeys(matO, ["read", "phase", "slice", "partitions"], at("matrix"));
  const nRead = plainNumber(matO["read"], at("matrix.read"), { min: 1, max: 4096, integer: true });
  const nPhase = matO["phase"] === undefined ? nRead : plainNumber(matO["phase"], at("matrix.phase"), { min: 1, max: 4096, integer: true });
  // "partitions" is the old name of matrix.slice (the count of slice-encoding steps of a 3D
  // slab); accepted for this release with a deprecation warning.
  if (matO["partitions"] !== undefined && matO["slice"] !== undefined) throw userError(at("matrix.partitions"), `give the slice-encoding steps once, as matrix.slice; "partitions" is its old name`);
  const sliceKey = matO["partitions"] !== undefined ? "partitions" : "slice";
  if (sliceKey === "partitions") warnings.push(`matrix.partitions is deprecated and will be removed in the next release; write "matrix": { "slice": ${String(matO["partitions"])} } (the number of slice-encoding steps)`);
  const nSlice = matO[sliceKey] === undefined ? 1 : plainNumber(matO[sliceKey], at(`matrix.${sliceKey}`), { min: 1, max: 1024, integer: true });
  if (def.threeD && nSlice < 2) throw userError(at(`matrix.${sliceKey}`), `a 3D sequence needs at least 2 slice-encoding steps, got ${nSlice}; e.g. "matrix": { "slice": 16 }`);
  if (!def.threeD && nSlice !== 1) throw userError(at(`matrix.${sliceKey}`), `only the 3D sequence (gre3d) encodes along the slice; remove matrix.${sliceKey} or use "sequence": "gre3d"`);

  const slO = sub(obj, "slice", root)!;
  checkKeys(slO, ["thickness", "position", "orientation", "angle", "tiltAxis"], at("slice"));
  const thickness = positive(slO["thickness"], "length", at("slice.thickness"));
  const position = slO["position"] === undefined ? 0 : quantity(slO["position"], "length", at("slice.position"));
  const orientation = oneOf<Orientation>(slO["orientation"], ["axial", "coronal", "sagittal"], at("slice.orientation"), D.orientation);
  const angle = slO["angle"] === undefined ? 0 : quantity(slO["angle"], "angle", at("slice.angle"));
  if (Math.abs(angle) > (60 * Math.PI) / 180) throw userError(at("slice.angle"), `an oblique tilt must be within ±60 deg of the orientation, got ${String(slO["angle"])}; choose the nearer orientation`);
  const tiltAxis = oneOf(slO["tiltAxis"], ["read", "phase"] as const, at("slice.tiltAxis"), D.tiltAxis);
  const msO = sub(obj, "slices", root, false) ?? {};
  checkKeys(msO, ["count", "gap", "order"], at("slices"));
  const sliceCount = msO["count"] === undefined ? D.sliceCount : plainNumber(msO["count"], at("slices.count"), { min: 1, max: 256, integer: true });
  const sliceGap = msO["gap"] === undefined ? D.sliceGap : nonNegative(msO["gap"], "length", at("slices.gap"));
  const sliceOrder = oneOf<SliceOrder>(msO["order"], ["sequential", "interleaved"], at("slices.order"), D.sliceOrder);
  if (def.threeD && sliceCount > 1) throw userError(at("slices.count"), `a 3D slab is one volume; use matrix.slice instead of several slices`);
  const inPlane: Record<Orientation, PhysicalAxis[]> = { axial: ["x", "y"], coronal: ["x", "z"], sagittal: ["y", "z"] };
  const defaultPhase: Record<Orientation, PhysicalAxis> = { axial: "y", coronal: "x", sagittal: "y" };
  const phaseDirection = oneOf<PhysicalAxis>(obj["phaseDirection"], inPlane[orientation], at("phaseDirection"), defaultPhase[orientation]);

  const pixelBandwidth = parseBandwidth(obj["bandwidth"] ?? D.bandwidth, nRead, field, at("bandwidth"));
  const te = positive(obj["te"], "time", at("te"));
  const tr = positive(obj["tr"], "time", at("tr"));
  const flip = obj["flip"] === undefined ? D.flip : flipAngle(obj["flip"], at("flip"));
  const refocusFlip = obj["refocusFlip"] === undefined ? D.refocusFlip : flipAngle(obj["refocusFlip"], at("refocusFlip"));

  const osO = sub(obj, "oversampling", root, false) ?? {};
  checkKeys(osO, ["read", "phase"], at("oversampling"));
  const osRead = osO["read"] === undefined ? D.oversampling.read : plainNumber(osO["read"], at("oversampling.read"), { min: 1, max: 8 });
  const osPhase = osO["phase"] === undefined ? D.oversampling.phase : plainNumber(osO["phase"], at("oversampling.phase"), { min: 0, max: 2 });
  if (!Number.isInteger(osRead * nRead)) throw userError(at("oversampling.read"), `read oversampling × matrix.read must be a whole number of samples`);

  const polarity = oneOf(obj["readoutPolarity"], ["positive", "negative"] as const, at("readoutPolarity"), D.readoutPolarity);
  const pfO = sub(obj, "partialFourier", root, false) ?? {};
  checkKeys(pfO, ["phase", "read", "method"], at("partialFourier"));
  const pfPhase = pfO["phase"] === undefined ? D.partialFourier.phase : plainNumber(pfO["phase"], at("partialFourier.phase"), { min: 0.5, max: 1 });
  const pfRead = pfO["read"] === undefined ? D.partialFourier.read : plainNumber(pfO["read"], at("partialFourier.read"), { min: 0.5, max: 1 });
  const pfMethod = oneOf<PartialFourierRecon>(pfO["method"], ["zero-fill", "homodyne"], at("partialFourier.method"), D.partialFourier.method);

  const receiverFilter = obj["receiverFilter"] === undefined ? D.receiverFilter : obj["receiverFilter"];
  if (typeof receiverFilter !== "boolean") throw userError(at("receiverFilter"), "must be true or false");

  const hwO = sub(obj, "hardware", root, false) ?? {};
  checkKeys(hwO, ["gmax", "slew"], at("hardware"));
  const gmax = hwO["gmax"] === undefined ? D.hardware.gmax : positive(hwO["gmax"], "gradient", at("hardware.gmax"));
  const slew = hwO["slew"] === undefined ? D.hardware.slew : positive(hwO["slew"], "slew", at("hardware.slew"));

  const excitation = pulse(sub(obj, "excitation", root, false), at("excitation"), D.excitation);
  const refocusing = pulse(sub(obj, "refocusing", root, false), at("refocusing"), D.refocusing);

  const spoiling = oneOf(obj["spoiling"], ["ideal", "rf", "none"] as const, at("spoiling"), D.spoiling);
  const rfSpoilIncrement = obj["rfSpoilIncrement"] === undefined ? D.rfSpoilIncrement : quantity(obj["rfSpoilIncrement"], "angle", at("rfSpoilIncrement"));
  const dummyScans = obj["dummyScans"] === undefined ? D.dummyScans : plainNumber(obj["dummyScans"], at("dummyScans"), { min: 0, max: 100000, integer: true });
  const phaseOrder = oneOf(obj["phaseOrder"], ["linear", "centre-out"] as const, at("phaseOrder"), D.phaseOrder);
  const averages = obj["averages"] === undefined ? D.averages : plainNumber(obj["averages"], at("averages"), { min: 1, max: 1024, integer: true });
  const ssfpPreparation = oneOf(obj["ssfpPreparation"], ["none", "half-alpha"] as const, at("ssfpPreparation"), D.ssfpPreparation);
  const echoTrainLength = obj["echoTrainLength"] === undefined ? D.echoTrainLength : plainNumber(obj["echoTrainLength"], at("echoTrainLength"), { min: 1, max: 1024, integer: true });
  const echoSpacing = obj["echoSpacing"] === undefined ? D.echoSpacing : positive(obj["echoSpacing"], "time", at("echoSpacing"));
  const echoOrder = oneOf<EchoOrder>(obj["echoOrder"], ["linear", "centric"], at("echoOrder"), D.echoOrder);
  const shots = obj["shots"] === undefined ? D.shots : plainNumber(obj["shots"], at("shots"), { min: 1, max: 1024, integer: true });
  const epiEcho = oneOf(obj["epiEcho"], ["gradient", "spin"] as const, at("epiEcho"), D.epiEcho);
  const crusherCycles = obj["crusherCycles"] === undefined ? D.crusherCycles : plainNumber(obj["crusherCycles"], at("crusherCycles"), { min: 0, max: 100 });
  const spoilerCycles = obj["spoilerCycles"] === undefined ? D.spoilerCycles : plainNumber(obj["spoilerCycles"], at("spoilerCycles"), { min: 0, max: 100 });

  const shim = obj["shim"] === undefined ? D.shim : quantity(obj["shim"], "frequency", at("shim"));

  return {
    sequence, field,
    fov: { read: fovRead, phase: fovPhase },
    matrix: { read: nRead, phase: nPhase, slice: nSlice },
    warnings,
    slice: { thickness, position, orientation, angle, tiltAxis },
    slices: { count: sliceCount, gap: sliceGap, order: sliceOrder },
    phaseDirection, readoutPolarity: polarity === "positive" ? 1 : -1, pixelBandwidth,
    bandwidthAsGiven: String(obj["bandwidth"] ?? D.bandwidth),
    te, tr, flip, refocusFlip,
    oversampling: { read: osRead, phase: osPhase },
    receiverFilter,
    partialFourier: { phase: pfPhase, read: pfRead, method: pfMethod },
    hardware: { gmax, slew },
    excitation, refocusing, spoiling, rfSpoilIncrement, dummyScans, phaseOrder, averages,
    crusherCycles, spoilerCycles, shim,
    ssfpPreparation, echoTrainLength, echoSpacing, echoOrder, shots, epiEcho,
  };
}

