/**
 * Partial k-space of one shard: partial.npy holds the shard's block sums,
 * complex128 of shape [blocks, coil, slice, phase, read]; partial.json
 * names the shard, its blocks and chunks, the inputs, and a hash of the
 * normalised protocol, the phantom file's bytes, the isochromat options and
 * the engine's chunking, so that a merge only adds parts of one run.
 */
import { createHash } from "node:crypto";
import { existsSync, readFileSync, statSync } from "node:fs";
import { join, resolve } from "node:path";
import { UserError } from "../errors.js";
import { OutputStage } from "../io/atomic.js";
import { decodeNpy, encodeNpy } from "../io/npy.js";
import type { Protocol } from "../protocol/index.js";
import { BLOCK_CHUNKS, readoutKernelName, type ReadoutReport } from "../engine/index.js";
import { chunkIsochromatsFromEnv, wasmFromEnv } from "./options.js";
import type { IsochromatOptions } from "../isochromats/index.js";

export const PARTIAL_FORMAT = "isofold partial k-space";
export const PARTIAL_VERSION = 1;

export interface PartialMeta {
  format: string;
  version: number;
  /** Shard index i (0-based) of n. */
  shard: [number, number];
  /** Blocks [b0, b1) of totalBlocks held here; block b sums chunks b·blockChunks … (b+1)·blockChunks − 1 in order. */
  blocks: [number, number];
  totalBlocks: number;
  chunks: number;
  blockChunks: number;
  chunkIsochromats: number;
  shape: number[];
  inputHash: string;
  inputs: { phantom: string; protocol: string; sets: string[]; seed: number; iso: IsochromatOptions; truth?: boolean };
  protocol: Protocol;
  isoSummary: {
    count: number; columns: number; warnings: string[]; spreads?: { tissue: string; t2prime: number | null; isochromats: number; model?: "spread" | "closed form" }[];
    sampling?: import("./pipeline.js").IsoSampling; extent?: import("../isochromats/index.js").SampledExtent; notes?: string[];
  };
  engine: { chunks: number; rfClasses: number; ops: number; workers: number; readout?: ReadoutReport };
}

/** sha256 over what determines the k-space bits: normalised protocol, phantom file bytes, isochromat options, chunking, readout kernel, seed. */
export function inputHash(protocol: Protocol, o: { phantom: string; iso: IsochromatOptions; seed: number }): string {
  const h = createHash("sha256");
  h.update(JSON.stringify({ protocol, iso: o.iso, seed: o.seed, chunk: chunkIsochromatsFromEnv(), block: BLOCK_CHUNKS, kernel: readoutKernelName(wasmFromEnv()) }));
  h.update(readFileSync(o.phantom));
  return h.digest("hex");
}

/** Writes partial.npy and partial.json into `dir` (staged; both appear together). */
export function writePartial(
  dir: string,
  p: Omit<PartialMeta, "format" | "version" | "blockChunks" | "chunkIsochromats"> & { re: Float64Array; im: Float64Array },
): string[] {
  const { re, im, ...rest } = p;
  const meta: PartialMeta = { format: PARTIAL_FORMAT, version: PARTIAL_VERSION, blockChunks: BLOCK_CHUNKS, chunkIsochromats: chunkIsochromatsFromEnv(), ...rest };
  const stage = new OutputStage(dir);
  try {
    stage.add("partial.npy", encodeNpy({ dtype: "complex128", shape: p.shape, data: { re, im } }));
    stage.add("partial.json", JSON.stringify(meta, null, 2) + "\n");
    stage.commit();
    return stage.staged;
  } catch (e) {
    stage.abort();
    throw e;
  }
}

/** Reads a part: a shard's folder, or its partial.json. */
export function readPartial(path: string): { meta: PartialMeta; re: Float64Array; im: Float64Array; source: string } {
  let dir = resolve(path);
  if (existsSync(dir) && statSync(dir).isFile()) dir = resolve(dir, "..");
  const jf = join(dir, "partial.json"), nf = join(dir, "partial.npy");
  if (!existsSync(jf) || !existsSync(nf)) throw new UserError(`not a shard's output: expected partial.json and partial.npy in ${dir} (written by simulate --shard i/N)`, path);
  let meta: PartialMeta;
  try {
    meta = JSON.parse(readFileSync(jf, "utf8")) as PartialMeta;
  } catch {
    throw new UserError("partial.json is not valid JSON", jf);
  }
  if (meta.format !== PARTIAL_FORMAT || meta.version !== PARTIAL_VERSION) throw new UserError(`not an ${PARTIAL_FORMAT} file of version ${PARTIAL_VERSION}`, jf, "format");
  const arr = decodeNpy(readFileSync(nf), nf);
  if (arr.dtype !== "complex128" || arr.shape.join(",") !== meta.shape.join(",")) {
    throw new UserError(`expected complex128 of shape [${meta.shape.join(", ")}], got ${arr.dtype} [${arr.shape.join(", ")}]`, nf);
  }
  return { meta, re: arr.data.re, im: arr.data.im, source: path };
}
