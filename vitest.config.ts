import { defineConfig } from "vitest/config";

/** Files that drive Debian's chromium (pages with their own worker threads): run on their own, after the rest. */
const BROWSER = ["test/preview-browser.test.ts", "test/preview-edits.test.ts", "test/report-browser.test.ts"];

// A test that runs on the default 5 s budget can fail on a busy 2-core laptop although
// nothing is wrong. Every test is kept to a few seconds idle; the budget below is the
// safety margin for a loaded machine, not a licence for slow tests.
export default defineConfig({
  test: {
    testTimeout: 60_000,
    hookTimeout: 60_000,
    // A process runs its files one after another without reloading the modules per
    // file: about 30 s of the suite was module loading. Tests must leave no global
    // state behind (restore what they set in afterAll).
    isolate: false,
    // removes the folders test/helpers.ts's tempDir made, once each file ends
    setupFiles: ["test/setup.ts"],
    projects: [
      // two processes share the files (on 2 cores: about 270 s against 390 s one after another)
      { extends: true, test: { name: "core", exclude: [...BROWSER, "**/node_modules/**"], maxWorkers: 2, sequence: { groupOrder: 0 } } },
      // the browser's pages then have the machine to themselves, one file at a time: beside
      // the other files a page's simulation took over 30 s where it takes 9 s alone
      { extends: true, test: { name: "browser", include: BROWSER, maxWorkers: 1, sequence: { groupOrder: 1 } } },
    ],
  },
});
