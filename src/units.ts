/**
 * Units at the edges. Protocol and phantom files carry strings such as
 * "24 cm", "250 Hz/px", "40 mT/m"; this module turns them into SI numbers
 * (s, m, T, T/m, T/m/s, Hz, rad) with mathjs, and adds the units mathjs lacks
 * (px, gauss, ppm) once. Nothing inside the simulation sees a unit.
 */
import type { Unit, MathJsStatic, FactoryFunctionMap } from "mathjs";
import mathjsBundle from "mathjs/lib/browser/math.js";
import { userError, type Origin } from "./errors.js";
import { describeValue } from "./json.js";

// mathjs's single-file build loads about four times faster than its many ES modules,
// which matters for a command-line tool's start-up; the API is the same. It is a
// CommonJS/UMD file: Node, esbuild and browsers' bundlers all import it as a default export.
const mathjs = mathjsBundle as unknown as {
  create: (f: FactoryFunctionMap, c: object) => MathJsStatic;
  all: FactoryFunctionMap;
};
export const math = mathjs.create(mathjs.all, {});
math.createUnit("px", { aliases: ["pixel", "pixels"] });
math.createUnit("gauss", { definition: "1e-4 T", prefixes: "short", aliases: ["Gs"] });
math.createUnit("ppm", { definition: "1e-6 rad", aliases: [] });

/** The SI unit each kind of quantity is stored in, and a readable example. */
export const KINDS = {
  length: { si: "m", example: "\"24 cm\"" },
  time: { si: "s", example: "\"5 ms\"" },
  field: { si: "T", example: "\"3 T\"" },
  gradient: { si: "T/m", example: "\"40 mT/m\"" },
  slew: { si: "T/m/s", example: "\"150 T/m/s\"" },
  frequency: { si: "Hz", example: "\"250 Hz\"" },
  angle: { si: "rad", example: "\"20 deg\"" },
  pixelBandwidth: { si: "Hz/px", example: "\"250 Hz/px\"" },
  pixels: { si: "px", example: "\"1.5 px\"" },
} as const;
export type QuantityKind = keyof typeof KINDS;

const baseUnits = new Map<QuantityKind, Unit>();
function baseOf(kind: QuantityKind): Unit {
  let u = baseUnits.get(kind);
  if (!u) {
    u = math.unit(KINDS[kind].si);
    baseUnits.set(kind, u);
  }
  return u;
}

/** Parses a unit string into a mathjs Unit, or throws a UserError. */
export function parseUnit(raw: unknown, origin: Origin, kind?: QuantityKind): Unit {
  const example = kind ? KINDS[kind].example : "\"5 ms\"";
  if (typeof raw !== "string") {
    throw userError(origin, `expected a value with units as a string (e.g. ${example}), got ${describeValue(raw, 80)}`);
  }
  let u: Unit;
  try {
    // the degree sign is the common way to write an angle ("20°"): read as "20 deg"
    u = math.unit(raw.trim().replace(/\s*°$/, " deg"));
  } catch {
    throw userError(origin, `cannot read ${describeValue(raw, 80)} as a number with units; write it like ${example}`);
  }
  if (!u.units || u.units.length === 0 || u.value === null || u.value === undefined) {
    throw userError(origin, `${describeValue(raw, 80)} has no units; write it like ${example}`);
  }
  return u;
}

/** True if the unit string is of the given kind. */
export function isKind(u: Unit, kind: QuantityKind): boolean {
  return u.equalBase(baseOf(kind));
}

/**
 * Parses `raw` (e.g. "24 cm") as a quantity of `kind` and returns it in SI.
 * Throws a UserError naming origin if it has no units or the wrong ones.
 */
export function quantity(raw: unknown, kind: QuantityKind, origin: Origin): number {
  const u = parseUnit(raw, origin, kind);
  if (!isKind(u, kind)) {
    throw userError(origin, `${describeValue(raw, 80)} is not a ${kind}; expected units like ${KINDS[kind].example}`);
  }
  const v = u.toNumber(KINDS[kind].si);
  if (!Number.isFinite(v)) throw userError(origin, `${describeValue(raw, 80)} is not a finite number`);
  return v;
}

/** Like quantity(), and the value must be > 0. */
export function positive(raw: unknown, kind: QuantityKind, origin: Origin): number {
  const v = quantity(raw, kind, origin);
  if (!(v > 0)) throw userError(origin, `must be greater than zero, got ${describeValue(raw, 80)}`);
  return v;
}

/** Like quantity(), and the value must be ≥ 0. */
export function nonNegative(raw: unknown, kind: QuantityKind, origin: Origin): number {
  const v = quantity(raw, kind, origin);
  if (!(v >= 0)) throw userError(origin, `must not be negative, got ${describeValue(raw, 80)}`);
  return v;
}

/** A plain number (no units) in [min, max]; integer if asked. */
export function plainNumber(
  raw: unknown,
  origin: Origin,
  opts: { min?: number; max?: number; integer?: boolean } = {},
): number {
  if (typeof raw !== "number" || !Number.isFinite(raw)) {
    throw userError(origin, `expected a plain number, got ${describeValue(raw, 80)}`);
  }
  if (opts.integer && !Number.isInteger(raw)) throw userError(origin, `expected a whole number, got ${raw}`);
  if (opts.min !== undefined && raw < opts.min) throw userError(origin, `must be at least ${opts.min}, got ${raw}`);
  if (opts.max !== undefined && raw > opts.max) throw userError(origin, `must be at most ${opts.max}, got ${raw}`);
  return raw;
}
