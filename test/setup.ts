/** Runs in every test file (vitest.config.ts setupFiles): removes the temporary folders that test/tempdirs.ts's tempDir made (test/helpers.ts re-exports it). */
import { afterAll } from "vitest";
import { removeTempDirs } from "./tempdirs.js";

afterAll(() => removeTempDirs());
