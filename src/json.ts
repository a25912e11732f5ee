/**
 * Strict JSON for input files: JSON.parse plus the two things it lets pass.
 *
 *   - Duplicate keys. JSON.parse keeps the last of `{"te": "5 ms", "te": "9 ms"}`
 *     without a word (RFC 8259 §4 only says names "SHOULD be unique"), so a
 *     protocol could silently run with a value its author did not mean. A
 *     duplicate is a UserError naming the key path and both lines.
 *   - Deep nesting. No isofold file needs more than a few levels; a value
 *     nested deeper than MAX_DEPTH would only reach recursive code later
 *     (JSON.stringify in messages, deep merges) and end in a stack overflow.
 *
 * The scan is a small iterative tokenizer over text JSON.parse has already
 * accepted, so it only has to follow strings, brackets, colons and commas.
 * Shared leaf: imports only errors.ts.
 */
import { joinPath, userError } from "./errors.js";

/** Deepest nesting of objects and arrays an input file may have. */
export const MAX_DEPTH = 32;

interface Frame {
  obj: boolean;
  path: string;
  /** Object: key → text offset of its first occurrence. */
  keys: Map<string, number>;
  key: string;
  expectKey: boolean;
  index: number;
}

function lineCol(text: string, pos: number): string {
  const before = text.slice(0, pos);
  const line = before.split("\n").length;
  return `line ${line}, column ${pos - before.lastIndexOf("\n")}`;
}

function childPath(top: Frame | undefined): string {
  if (!top) return "";
  return top.obj ? joinPath(top.path === "" ? undefined : top.path, top.key) : joinPath(top.path === "" ? undefined : top.path, top.index);
}

/**
 * Throws a UserError for a duplicate key or nesting deeper than MAX_DEPTH in
 * `text`, which must already be valid JSON (JSON.parse accepted it).
 * `where` names the source in messages (a file name, or "--set key").
 */
export function checkJsonStructure(text: string, where: string | undefined): void {
  const stack: Frame[] = [];
  const n = text.length;
  let i = 0;
  while (i < n) {
    const c = text.charCodeAt(i);
    if (c === 34 /* " */) {
      const start = i++;
      while (i < n) {
        const d = text.charCodeAt(i);
        if (d === 92 /* \ */) i += 2;
        else if (d === 34) break;
        else i++;
      }
      i++;
      const top = stack[stack.length - 1];
      if (top && top.obj && top.expectKey) {
        const key = JSON.parse(text.slice(start, i)) as string;
        const first = top.keys.get(key);
        top.key = key;
        top.expectKey = false;
        if (first !== undefined) {
          throw userError(
            { file: where, path: childPath(top) },
            `duplicate key ${JSON.stringify(key)} at ${lineCol(text, start)} (first at ${lineCol(text, first)}); JSON readers keep only one of them, so give each key once`,
          );
        }
        top.keys.set(key, start);
      }
      continue;
    }
    if (c === 123 /* { */ || c === 91 /* [ */) {
      const top = stack[stack.length - 1];
      if (stack.length >= MAX_DEPTH) {
        throw userError({ file: where, path: childPath(top) }, `nested more than ${MAX_DEPTH} levels deep at ${lineCol(text, i)}; isofold files need only a few levels`);
      }
      stack.push({ obj: c === 123, path: childPath(top), keys: new Map(), key: "", expectKey: c === 123, index: 0 });
    } else if (c === 125 /* } */ || c === 93 /* ] */) {
      stack.pop();
    } else if (c === 44 /* , */) {
      const top = stack[stack.length - 1];
      if (top) {
        if (top.obj) top.expectKey = true;
        else top.index++;
      }
    }
    i++;
  }
}

/**
 * JSON.parse with a UserError that says where (line, column) the text is
 * broken, then the duplicate-key and depth checks of checkJsonStructure.
 * A leading byte-order mark is ignored.
 */
export function parseJsonStrict(text: string, file: string | undefined): unknown {
  const body = text.charCodeAt(0) === 0xfeff ? text.slice(1) : text;
  let value: unknown;
  try {
    value = JSON.parse(body);
  } catch (err) {
    const msg = (err as Error).message;
    const m = /position (\d+)/.exec(msg);
    let where = "";
    if (m) where = ` at ${lineCol(body, Number(m[1]))}`;
    else if (/end of JSON input/i.test(msg)) where = " at the end (the file stops early)";
    const detail = msg.replace(/\s*in JSON at position \d+.*$/, "").replace(/^JSON\.parse: /, "").split("\n")[0]!;
    throw userError({ file }, `not valid JSON${where}: ${detail} (JSON allows no comments or trailing commas)`);
  }
  checkJsonStructure(body, file);
  return value;
}

/** JSON.stringify for messages: never throws (cycles, depth), cut to `max` characters. */
export function describeValue(raw: unknown, max = 60): string {
  if (raw === undefined) return "nothing";
  let s: string;
  try {
    s = JSON.stringify(raw) ?? String(raw);
  } catch {
    s = Array.isArray(raw) ? "a list" : typeof raw === "object" ? "an object" : String(raw);
  }
  return s.length > max ? `${s.slice(0, max - 3)}...` : s;
}
