/**
 * B0 offset models of a phantom file, in Hz at a position (m):
 *   - `{ "expression": "40 * (x / 0.1)^2" }`: Hz as a function of x, y, z in
 *     metres, parsed and compiled once with mathjs. The parsed tree is checked
 *     against an allow-list before anything is compiled, so an expression can
 *     only do arithmetic on x, y, z and constants;
 *   - `{ "susceptibility": { "objects": [...] } }`: spheres and infinite
 *     cylinders of Δχ in a uniform B0 along z, closed forms (susceptibility.ts);
 *   - `{ "fieldMap": { "file": "map.npy", "origin": [...], "spacing": [...] } }`:
 *     a measured or computed map in Hz (fieldmap.ts).
 * Several may be given; their offsets add.
 */
import type { MathNode } from "mathjs";
import { joinPath, userError, type Origin } from "../errors.js";
import { math } from "../units.js";
import { parseSusceptibility } from "./susceptibility.js";
import { parseFieldMap } from "./fieldmap.js";

/** Symbols an expression may use. */
export const B0_SYMBOLS = ["x", "y", "z", "pi", "e"] as const;

/** Functions an expression may call. */
export const B0_FUNCTIONS = [
  "sin", "cos", "tan", "asin", "acos", "atan", "atan2", "sinh", "cosh", "tanh",
  "exp", "log", "log10", "sqrt", "cbrt", "abs", "sign", "pow", "hypot", "min", "max",
] as const;

/** Operators an expression may use (mathjs function names of + − * / ^ and unary ±). */
const OPERATORS = new Set(["add", "subtract", "multiply", "divide", "pow", "unaryMinus", "unaryPlus"]);
const SYMBOLS = new Set<string>(B0_SYMBOLS);
const FUNCTIONS = new Set<string>(B0_FUNCTIONS);

/** The b0 keys a phantom may have; when several are given their offsets add. */
export const B0_KINDS = ["expression", "susceptibility", "fieldMap"] as const;

/** A compiled B0 model. */
export interface B0Model {
  /** Offset (Hz) at (x, y, z) in m. */
  fn: (x: number, y: number, z: number) => number;
  description: string;
}

/** A real array read from a file: C order, shape [nz, ny, nx] or [ny, nx]. */
export interface RealArray {
  shape: number[];
  data: ArrayLike<number>;
}

/**
 * What parseB0 needs from outside the phantom stage: the main field (T) for
 * susceptibility models, and a reader for field-map files (the phantom stage
 * does not read .npy itself; the caller passes io's decoder in).
 */
export interface B0Context {
  fieldT: number;
  /** Folder relative file names are resolved against. */
  baseDir: string;
  /** Reads an .npy file of real numbers; throws UserError on a bad file. */
  readArray?: (path: string) => RealArray;
}

/**
 * Parses the `b0` value of a phantom file (origin.path is its key path,
 * usually "b0"): any of { "expression": …, "susceptibility": …, "fieldMap": … };
 * their offsets add. Throws a UserError naming the key path.
 */
export function parseB0(raw: unknown, origin: Origin, ctx?: B0Context): B0Model {
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    throw userError(origin, `expected an object with one or more of ${B0_KINDS.join(", ")}, e.g. { "expression": "40 * (x / 0.1)^2" } (Hz, x, y, z in m), got ${JSON.stringify(raw)}`);
  }
  const obj = raw as Record<string, unknown>;
  const keys = Object.keys(obj);
  for (const k of keys) {
    if (!(B0_KINDS as readonly string[]).includes(k)) {
      throw userError({ ...origin, path: joinPath(origin.path, k) }, `unknown key "${k}"; allowed: ${B0_KINDS.join(", ")}`);
    }
  }
  if (keys.length === 0) throw userError(origin, `empty; give one or more of ${B0_KINDS.join(", ")}`);
  const parts: B0Model[] = [];
  if ("expression" in obj) {
    const exprOrigin = { ...origin, path: joinPath(origin.path, "expression") };
    parts.push({ fn: compileB0Expression(obj.expression, exprOrigin), description: `expression ${JSON.stringify(obj.expression)} (Hz; x, y, z in m)` });
  }
  if ("susceptibility" in obj) {
    const o = { ...origin, path: joinPath(origin.path, "susceptibility") };
    if (!ctx) throw new Error("parseB0: a susceptibility model needs the field strength (B0Context)");
    parts.push(parseSusceptibility(obj.susceptibility, o, ctx.fieldT));
  }
  if ("fieldMap" in obj) {
    const o = { ...origin, path: joinPath(origin.path, "fieldMap") };
    if (!ctx) throw new Error("parseB0: a field map needs a B0Context");
    parts.push(parseFieldMap(obj.fieldMap, o, ctx));
  }
  if (parts.length === 1) return parts[0]!;
  const fns = parts.map((p) => p.fn);
  return {
    fn: (x, y, z) => {
      let v = 0;
      for (const f of fns) v += f(x, y, z);
      return v;
    },
    description: parts.map((p) => p.description).join(" + "),
  };
}

/**
 * Compiles a B0 expression (Hz; x, y, z in m) once and returns a function of
 * (x, y, z). Allowed: numbers, x y z pi e, + − * / ^, parentheses and the
 * functions in B0_FUNCTIONS. The function throws a UserError if the
 * expression gives anything but a finite real number at a point.
 */
export function compileB0Expression(raw: unknown, origin: Origin): (x: number, y: number, z: number) => number {
  if (typeof raw !== "string" || raw.trim() === "") {
    throw userError(origin, `expected an expression string in x, y, z (m) giving Hz, e.g. "40 * (x / 0.1)^2", got ${JSON.stringify(raw)}`);
  }
  let node: MathNode;
  try {
    node = math.parse(raw);
  } catch (err) {
    throw userError(origin, `cannot parse ${JSON.stringify(raw)}: ${(err as Error).message}`);
  }
  checkNode(node, raw, origin);
  const code = node.compile();
  // One scope reused for every call: a Map is used by mathjs as is (no wrapper per call).
  const scope = new Map<string, number>([["x", 0], ["y", 0], ["z", 0]]);
  return (x: number, y: number, z: number): number => {
    scope.set("x", x);
    scope.set("y", y);
    scope.set("z", z);
    const v: unknown = code.evaluate(scope);
    if (typeof v === "number" && Number.isFinite(v)) return v;
    throw userError(origin, `${JSON.stringify(raw)} gives ${math.format(v as never, { precision: 6 })} at (${x}, ${y}, ${z}) m; it must give a finite real number of Hz everywhere in the phantom`);
  };
}

function checkNode(node: MathNode, raw: string, origin: Origin): void {
  const bad = (what: string): never => {
    throw userError(
      origin,
      `${JSON.stringify(raw)}: ${what}. Allowed: numbers, the symbols ${B0_SYMBOLS.join(", ")}, + - * / ^, parentheses and the functions ${B0_FUNCTIONS.join(", ")}`,
    );
  };
  switch (node.type) {
    case "ConstantNode": {
      const v = (node as unknown as { value: unknown }).value;
      if (typeof v !== "number") bad(`the constant ${JSON.stringify(v)} is not a number`);
      return;
    }
    case "SymbolNode": {
      const name = (node as unknown as { name: string }).name;
      if (!SYMBOLS.has(name)) bad(`unknown symbol "${name}" (units are not allowed either: the expression gives Hz from x, y, z in m)`);
      return;
    }
    case "ParenthesisNode":
      checkNode((node as unknown as { content: MathNode }).content, raw, origin);
      return;
    case "OperatorNode": {
      const op = node as unknown as { fn: string; op: string; args: MathNode[] };
      if (!OPERATORS.has(op.fn)) bad(`the operator "${op.op}" is not allowed`);
      for (const a of op.args) checkNode(a, raw, origin);
      return;
    }
    case "FunctionNode": {
      const f = node as unknown as { fn: MathNode; args: MathNode[] };
      const fnName = f.fn.type === "SymbolNode" ? (f.fn as unknown as { name: string }).name : undefined;
      if (fnName === undefined || !FUNCTIONS.has(fnName)) bad(`the function ${fnName ? `"${fnName}"` : "call"} is not allowed`);
      for (const a of f.args) checkNode(a, raw, origin);
      return;
    }
    case "AssignmentNode":
    case "FunctionAssignmentNode":
      return bad("assignments and function definitions are not allowed");
    default:
      return bad(`${describeNode(node.type)} is not allowed`);
  }
}

function describeNode(type: string): string {
  switch (type) {
    case "ArrayNode": return "a matrix or list";
    case "AccessorNode": return "indexing or property access";
    case "IndexNode": return "indexing";
    case "ObjectNode": return "an object";
    case "BlockNode": return "more than one statement";
    case "ConditionalNode": return "a conditional (? :)";
    case "RangeNode": return "a range";
    case "RelationalNode": return "a comparison";
    default: return `a ${type}`;
  }
}
