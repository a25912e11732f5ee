/**
 * Temporary folders of a test file, removed when the file ends (test/setup.ts).
 * Kept apart from test/helpers.ts so the setup file, which runs in every test
 * file, imports nothing heavy.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";

const madeDirs: string[] = [];

/** A fresh temporary folder, removed after the test file ends. */
export function tempDir(prefix = "isofold-test-"): string {
  const d = mkdtempSync(join(tmpdir(), prefix));
  madeDirs.push(d);
  return d;
}

/** Removes the folders tempDir made in this test file (called from test/setup.ts's afterAll). */
export function removeTempDirs(): void {
  for (const d of madeDirs.splice(0)) rmSync(d, { recursive: true, force: true });
}
