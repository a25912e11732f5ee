/**
 * The dataset folder on disk (Node): manifest files, resume and the batch
 * loop, and dataset-merge. Every file is written atomically (io/atomic.ts):
 * each case is staged and published with OutputStage, then the manifest is
 * rewritten. The decisions that need no file system — manifest lines, the
 * check that joins parts — are in dataset/batch.ts.
 */
import { createHash } from "node:crypto";
import { existsSync, mkdirSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { join } from "node:path";
import { UserError } from "../errors.js";
import { writeFileAtomic, OutputStage } from "./atomic.js";
import {
  caseDirName, joinDatasetParts, manifestName, manifestText, parseManifest, partRange,
  type CaseFiles, type DatasetPart, type ManifestEntry,
} from "../dataset/batch.js";

export function sha256(data: Uint8Array | string): string {
  return createHash("sha256").update(data).digest("hex");
}

export function readManifest(dir: string, name = "manifest.jsonl"): Map<number, ManifestEntry> {
  const file = join(dir, name);
  return existsSync(file) ? parseManifest(readFileSync(file, "utf8")) : new Map();
}

export function writeManifest(dir: string, entries: Map<number, ManifestEntry>, name = "manifest.jsonl"): void {
  writeFileAtomic(join(dir, name), manifestText(entries));
}

/** True if every file of the entry exists in its case folder with the listed checksum. */
export function verifyCase(dir: string, e: ManifestEntry, key: string): boolean {
  if (e.key !== key) return false;
  for (const [name, hash] of Object.entries(e.files)) {
    const f = join(dir, e.dir, name);
    if (!existsSync(f) || sha256(readFileSync(f)) !== hash) return false;
  }
  return Object.keys(e.files).length > 0;
}

/**
 * Runs cases 0…count−1 (or the part's range) into `dir`, skipping verified
 * ones. makeCase returns the files of one case (name → bytes) and its
 * manifest parameters. Each case is staged and published with OutputStage,
 * then the manifest is rewritten atomically. Returns the numbers of cases
 * made and skipped.
 */
export async function runBatch(
  dir: string, count: number, seed: number, keyOf: (i: number) => string,
  makeCase: (i: number) => CaseFiles | Promise<CaseFiles>,
  onCase?: (i: number, skipped: boolean) => void,
  part?: { range?: [number, number]; batch?: string },
): Promise<{ made: number[]; skipped: number[] }> {
  mkdirSync(dir, { recursive: true });
  const name = manifestName(part?.range);
  const manifest = readManifest(dir, name);
  const made: number[] = [], skipped: number[] = [];
  const [from, to] = part?.range ?? [0, count];
  for (let i = from; i < to; i++) {
    const folder = caseDirName(i), key = keyOf(i);
    const old = manifest.get(i);
    if (old && old.dir === folder && verifyCase(dir, old, key)) {
      skipped.push(i);
      onCase?.(i, true);
      continue;
    }
    // staging folders of an interrupted earlier run of this case (ours: case-NNNN.<pid>.tmp)
    for (const f of readdirSync(dir)) {
      if (new RegExp(`^${folder}\\.\\d+\\.tmp$`).test(f)) rmSync(join(dir, f), { recursive: true, force: true });
    }
    manifest.delete(i);
    const { files, params } = await makeCase(i);
    const stage = new OutputStage(join(dir, folder));
    const hashes: Record<string, string> = {};
    try {
      for (const [f, bytes] of files) {
        stage.add(f, bytes);
        hashes[f] = sha256(bytes);
      }
      stage.commit();
    } catch (e) {
      stage.abort();
      throw e;
    }
    manifest.set(i, { case: i, dir: folder, key, seed, params, files: hashes, ...(part?.batch ? { batch: part.batch, count } : {}) });
    writeManifest(dir, manifest, name);
    made.push(i);
    onCase?.(i, false);
  }
  return { made, skipped };
}

/**
 * Joins the parts of one batch made with --cases A:B (their manifest-A-B.jsonl
 * files in `dir`) into manifest.jsonl after dataset/batch.ts joinDatasetParts
 * has checked them (nothing is written when it refuses).
 */
export function mergeDatasetParts(dir: string): { parts: string[]; count: number } {
  let names: string[];
  try {
    names = readdirSync(dir);
  } catch {
    throw new UserError(`cannot read the folder ${dir}; give the --out folder of the dataset parts`, undefined, "dataset-merge");
  }
  const parts: DatasetPart[] = [];
  for (const f of names) {
    const r = partRange(f);
    if (r) parts.push({ file: f, from: r[0], to: r[1], entries: readManifest(dir, f) });
  }
  const { entries, count } = joinDatasetParts(parts, (e) => verifyCase(dir, e, e.key), dir);
  writeManifest(dir, entries);
  return { parts: parts.sort((a, b) => a.from - b.from || a.to - b.to).map((p) => p.file), count };
}
