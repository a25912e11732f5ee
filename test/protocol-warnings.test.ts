/**
 * `isofold protocol`'s table: no empty "warnings" row when the protocol has
 * no warnings, one row per warning when it has some.
 */
import { describe, expect, it } from "vitest";
import { listPresets } from "../src/cli/inputs.js";
import { protocolInProcess, tempDir, writeJson } from "./helpers.js";

describe("protocol table: warnings", () => {
  it("no warnings: no warnings row (every preset)", async () => {
    for (const preset of listPresets()) {
      expect(await protocolInProcess(preset), preset).not.toMatch(/^warnings?\b/m);
    }
  });

  it("a warning: one row `warning` with its text", async () => {
    const dir = tempDir();
    const pf = writeJson(dir, "p.json", {
      sequence: "gre3d", field: "1.5 T", fov: { read: "24 cm", phase: "24 cm" }, matrix: { read: 32, phase: 32, partitions: 8 },
      slice: { thickness: "4 mm" }, bandwidth: "250 Hz/px", te: "4 ms", tr: "12 ms", flip: "15 deg",
    });
    const err = process.stderr.write;
    process.stderr.write = () => true; // the same warning also goes to stderr
    let out: string;
    try {
      out = await protocolInProcess(pf);
    } finally {
      process.stderr.write = err;
    }
    const rows = out.split("\n").filter((l) => /^warnings?\b/.test(l));
    expect(rows).toHaveLength(1);
    expect(rows[0]).toMatch(/^warning\s+matrix\.partitions is deprecated/);
  });
});
