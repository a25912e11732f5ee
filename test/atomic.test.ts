import { afterEach, beforeEach, describe, expect, it } from "vitest";
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { OutputStage, writeFileAtomic } from "../src/io/atomic.js";

let root: string;
beforeEach(() => {
  root = mkdtempSync(join(tmpdir(), "isofold-atomic-"));
});
afterEach(() => {
  rmSync(root, { recursive: true, force: true });
});

describe("writeFileAtomic", () => {
  it("writeFileAtomic writes bytes and strings and leaves no temporary file", () => {
    const p = join(root, "a.bin");
    writeFileAtomic(p, Uint8Array.from([1, 2, 3]));
    expect(Array.from(readFileSync(p))).toEqual([1, 2, 3]);
    writeFileAtomic(p, "héllo");
    expect(readFileSync(p, "utf8")).toBe("héllo");
    expect(readdirSync(root)).toEqual(["a.bin"]);
  });

  it("writeFileAtomic throws and leaves nothing when the directory does not exist", () => {
    const p = join(root, "missing", "a.bin");
    expect(() => writeFileAtomic(p, "x")).toThrow();
    expect(readdirSync(root)).toEqual([]);
  });
});

describe("OutputStage", () => {
  it("OutputStage.add writes nothing under final names until commit, then commit publishes all files", () => {
    const dir = join(root, "out", "run1");
    const stage = new OutputStage(dir);
    stage.add("report.json", '{"a":1}');
    stage.add("image.npy", Uint8Array.from([9, 8]));
    expect(existsSync(dir)).toBe(false);
    expect(existsSync(stage.path("report.json"))).toBe(false);
    const written = stage.commit();
    expect(written).toEqual([join(dir, "report.json"), join(dir, "image.npy")]);
    expect(readFileSync(join(dir, "report.json"), "utf8")).toBe('{"a":1}');
    expect(Array.from(readFileSync(join(dir, "image.npy")))).toEqual([9, 8]);
    expect(readdirSync(join(root, "out"))).toEqual(["run1"]);
  });

  it("OutputStage.addInBackground publishes nothing until commitAsync, then the same bytes; a name added again keeps its last data", async () => {
    const dir = join(root, "out", "run1");
    const stage = new OutputStage(dir);
    const big = Uint8Array.from({ length: 300_000 }, (_, i) => (i * 7) & 0xff);
    stage.addInBackground("report.json", '{"a":1}');
    stage.addInBackground("big.npy", big);
    stage.addInBackground("x.txt", "first");
    stage.addInBackground("x.txt", "second");
    expect(existsSync(dir)).toBe(false);
    const written = await stage.commitAsync();
    expect(written).toEqual([join(dir, "report.json"), join(dir, "big.npy"), join(dir, "x.txt")]);
    expect(readFileSync(join(dir, "report.json"), "utf8")).toBe('{"a":1}');
    expect(Buffer.compare(readFileSync(join(dir, "big.npy")), Buffer.from(big))).toBe(0);
    expect(readFileSync(join(dir, "x.txt"), "utf8")).toBe("second");
    expect(readdirSync(join(root, "out"))).toEqual(["run1"]);
  });

  it("OutputStage.commitAsync rejects and publishes nothing when a background write fails; settle then abort leaves nothing", async () => {
    const dir = join(root, "run");
    const stage = new OutputStage(dir);
    mkdirSync(stage.tempPath("a.txt")); // a directory where the file should go: its write fails
    stage.addInBackground("a.txt", "a");
    stage.addInBackground("b.txt", "b");
    await expect(stage.commitAsync()).rejects.toThrow();
    expect(existsSync(dir)).toBe(false);
    await stage.settle();
    stage.abort();
    expect(existsSync(dir)).toBe(false);
    expect(readdirSync(stage.stagingDir)).toEqual(["a.txt"]); // b.txt removed; the directory made above is not the stage's to remove
  });

  it("OutputStage.commit replaces an older file of the same name and keeps other files", () => {
    const dir = join(root, "run");
    const stage0 = new OutputStage(dir);
    stage0.add("image.png", "old");
    stage0.add("keep.txt", "k");
    stage0.commit();
    const stage = new OutputStage(dir);
    stage.add("image.png", "new");
    stage.commit();
    expect(readFileSync(join(dir, "image.png"), "utf8")).toBe("new");
    expect(readFileSync(join(dir, "keep.txt"), "utf8")).toBe("k");
  });

  it("OutputStage.abort removes the staged files and publishes nothing", () => {
    const dir = join(root, "run");
    const stage = new OutputStage(dir);
    stage.add("a.txt", "a");
    writeFileSync(stage.tempPath("b.txt"), "b");
    stage.abort();
    expect(readdirSync(root)).toEqual([]);
    expect(() => stage.commit()).toThrow(/aborted/);
  });

  it("OutputStage.tempPath lets a writer fill a file that commit then publishes", () => {
    const dir = join(root, "run");
    const stage = new OutputStage(dir);
    writeFileSync(stage.tempPath("big.npy"), "data");
    expect(existsSync(join(dir, "big.npy"))).toBe(false);
    stage.commit();
    expect(readFileSync(join(dir, "big.npy"), "utf8")).toBe("data");
  });

  it("OutputStage.add throws RangeError for names with a directory part", () => {
    const stage = new OutputStage(join(root, "run"));
    expect(() => stage.add("../x", "x")).toThrow(RangeError);
    expect(() => stage.add("a/b", "x")).toThrow(RangeError);
  });
});
