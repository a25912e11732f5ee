import { defineConfig } from "vitest/config";

// A test that runs on the default 5 s budget can fail on a busy 2-core laptop although
// nothing is wrong. Every test is kept to a few seconds idle; the budget below is the
// safety margin for a loaded machine, not a licence for slow tests.
export default defineConfig({
  test: {
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // One process runs every file, one after another, without reloading the
    // modules per file: about 30 s of the suite was module loading. Tests must
    // leave no global state behind (restore what they set in afterAll).
    isolate: false,
    // Two such processes share the files (on 2 cores: 268 s against 392 s one after another, the
    // longest test 17 s): a file's CLI runs and helper threads then share the cores with the other's.
    maxWorkers: 2,
    // removes the folders test/helpers.ts's tempDir made, once each file ends
    setupFiles: ["test/setup.ts"],
  },
});
