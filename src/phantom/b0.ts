/**
 * B0 offset models of a phantom file. For now only
 * `{ "expression": "40 * (x / 0.1)^2" }`: Hz as a function of x, y, z in
 * metres, parsed and compiled once with mathjs. The parsed tree is checked
 * against an allow-list before anything is compiled, so an expression can
 * only do arithmetic on x, y, z and constants.
 */
import type { MathNode } from "mathjs";
import { joinPath, userError, type Origin } from "../errors.js";
import { math } from "../units.js";

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

/** The b0 keys a phantom may have one of; only "expression" works yet. */
export const B0_KINDS = ["expression", "susceptibility", "fieldMap"] as const;

/** A compiled B0 model. */
export interface B0Model {
  /** Offset (Hz) at (x, y, z) in m. */
  fn: (x: number, y: number, z: number) => number;
  description: string;
}

/**
 * Parses the `b0` value of a phantom file (origin.path is its key path,
 * usually "b0"). Throws a UserError naming the key path for anything but
 * `{ "expression": string }` with an allowed expression.
 */
export function parseB0(raw: unknown, origin: Origin): B0Model {
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    throw userError(origin, `expected an object like { "expression": "40 * (x / 0.1)^2" } (Hz, x, y, z in m), got ${JSON.stringify(raw)}`);
  }
  const obj = raw as Record<string, unknown>;
  const keys = Object.keys(obj);
  for (const k of keys) {
    if (!(B0_KINDS as readonly string[]).includes(k)) {
      throw userError({ ...origin, path: joinPath(origin.path, k) }, `unknown key "${k}"; allowed: ${B0_KINDS.join(", ")} (only "expression" is supported yet)`);
    }
  }
  for (const k of ["susceptibility", "fieldMap"]) {
    if (k in obj) {
      throw userError({ ...origin, path: joinPath(origin.path, k) }, `only "expression" is supported yet; write b0 as { "expression": "..." } giving Hz with x, y, z in metres`);
    }
  }
  if (!("expression" in obj)) {
    throw userError(origin, `missing "expression"; write b0 as { "expression": "40 * (x / 0.1)^2" } (Hz, x, y, z in m)`);
  }
  const exprOrigin = { ...origin, path: joinPath(origin.path, "expression") };
  const fn = compileB0Expression(obj.expression, exprOrigin);
  return { fn, description: `expression ${JSON.stringify(obj.expression)} (Hz; x, y, z in m)` };
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
