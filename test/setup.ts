/** Runs in every test file (vitest.config.ts setupFiles): removes the temporary folders that test/helpers.ts's tempDir made. */
import { afterAll } from "vitest";
import { removeTempDirs } from "./helpers.js";

afterAll(() => removeTempDirs());
