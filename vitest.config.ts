import { defineConfig } from "vitest/config";

// A test that runs on the default 5 s budget can fail on a busy 2-core laptop although
// nothing is wrong. Every test is kept to a few seconds idle; the budget below is the
// safety margin for a loaded machine, not a licence for slow tests.
export default defineConfig({
  test: {
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // removes the folders test/helpers.ts's tempDir made, once each file ends
    setupFiles: ["test/setup.ts"],
  },
});
