/**
 * Temporary folders of the tests, removed when the test process exits (the
 * suite shares one process across files: vitest.config.ts isolate false).
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";

const madeDirs: string[] = [];
let hooked = false;

/** A fresh temporary folder, removed after the test file ends. */
export function tempDir(prefix = "isofold-test-"): string {
  const d = mkdtempSync(join(tmpdir(), prefix));
  madeDirs.push(d);
  if (!hooked) {
    hooked = true;
    process.once("exit", removeTempDirs);
  }
  return d;
}

/** Removes the folders tempDir made in this test file (when the process exits). */
export function removeTempDirs(): void {
  for (const d of madeDirs.splice(0)) rmSync(d, { recursive: true, force: true });
}
