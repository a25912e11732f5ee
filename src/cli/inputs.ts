/**
 * The command line's file reading: protocol files and bundled presets,
 * phantom files and the field-map arrays they name. Parsing itself lives in
 * the stages (parseProtocol, parsePhantom), which take objects and bytes.
 */
import { readFileSync, existsSync, readdirSync } from "node:fs";
import { dirname, resolve, join } from "node:path";
import { fileURLToPath } from "node:url";
import { UserError, userError } from "../errors.js";
import { parseProtocol, type Protocol, type ProtocolResolver } from "../protocol/index.js";
import { parseJsonText, parsePhantom, type Phantom, type PhantomLoadOptions } from "../phantom/index.js";
import { decodeNpy } from "../io/npy.js";
import { repoRoot } from "./options.js";
import { parseJsonStrict } from "../json.js";

/** Folder of bundled presets (src/protocol/presets, copied beside the compiled code). */
export function presetsDir(): string {
  const here = dirname(fileURLToPath(import.meta.url));
  // compiled: dist/src/cli → ../../../src/protocol/presets; source: src/cli → ../protocol/presets
  const candidates = [resolve(here, "../protocol/presets"), resolve(here, "../../../src/protocol/presets")];
  for (const c of candidates) if (existsSync(c)) return c;
  return candidates[0]!;
}

type Json = null | boolean | number | string | Json[] | { [k: string]: Json };

/** Reads JSON with a one-line error naming the file and position. */
export function readJsonFile(file: string): Json {
  let text: string;
  try {
    text = readFileSync(file, "utf8");
  } catch {
    throw new UserError(`cannot read file (does it exist?)`, file);
  }
  return parseJsonStrict(text, file) as Json;
}

/** Names of the bundled presets. */
export function listPresets(): string[] {
  try {
    return readdirSync(presetsDir())
      .filter((f) => f.endsWith(".json"))
      .map((f) => f.replace(/\.json$/, ""))
      .sort();
  } catch {
    return [];
  }
}

/** A preset name (e.g. "gre-t1-3t") or a path; returns an absolute path or null. */
export function resolvePresetOrFile(name: string, relativeTo: string): string | null {
  const asPath = resolve(relativeTo, name);
  if (existsSync(asPath)) return asPath;
  const preset = join(presetsDir(), name.endsWith(".json") ? name : `${name}.json`);
  if (existsSync(preset)) return preset;
  return null;
}

/** `extend` through the file system: a path relative to the extending file, or a bundled preset. */
export const fileResolver: ProtocolResolver = (name, from) => {
  const target = resolvePresetOrFile(name, dirname(from));
  return target ? { source: target, json: readJsonFile(target) } : null;
};

/**
 * Loads, merges and validates a protocol. `file` may be a path or a preset name.
 * Throws UserError naming the file and key path on any bad value.
 */
export function loadProtocol(file: string, sets: string[] = []): Protocol {
  const path = resolvePresetOrFile(file, process.cwd());
  if (!path) throw new UserError(`no protocol file or preset named ${JSON.stringify(file)}; presets: ${listPresets().join(", ")}`);
  return parseProtocol(readJsonFile(path), { source: path, sets, resolve: fileResolver, presets: listPresets() });
}

/**
 * Reads and validates a phantom file. `fieldT` (T) selects the library
 * tissue values (see libraryTissue). Throws a UserError for a file that
 * cannot be read or is not valid JSON, naming line and column. Field maps
 * are read with readRealNpy unless `opts.readArray` says otherwise.
 */
export function loadPhantom(file: string, fieldT: number, opts: PhantomLoadOptions = {}): Phantom {
  let text: string;
  try {
    text = readFileSync(file, "utf8");
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    const why = code === "ENOENT" ? "no such file" : code === "EISDIR" ? "it is a directory" : (err as Error).message;
    throw userError({ file }, `cannot read the phantom file: ${why}; give the path of a phantom file (JSON), e.g. ${join(repoRoot(), "phantoms", "two-bottle.json")}`);
  }
  return parsePhantom(parseJsonText(text, file), file, fieldT, { readArray: readRealNpy, ...opts });
}

/** Reads a real .npy array (field maps) for the phantom stage. */
export function readRealNpy(path: string): { shape: number[]; data: ArrayLike<number> } {
  let bytes: Uint8Array;
  try {
    bytes = readFileSync(path);
  } catch {
    throw new UserError(`cannot read the file (does it exist?)`, path);
  }
  const a = decodeNpy(bytes, path);
  if (a.dtype === "complex64" || a.dtype === "complex128") throw new UserError(`expected a real array of Hz values, got ${a.dtype}`, path);
  return { shape: a.shape, data: a.data as ArrayLike<number> };
}

