/**
 * Crash-safe output: a file appears under its final name only once it is
 * complete. Data go to a temporary name in the same directory (so that the
 * final rename stays on one file system and is atomic under POSIX rename(2)),
 * are flushed with fsync, and are then renamed.
 */
import {
  closeSync,
  existsSync,
  fsyncSync,
  mkdirSync,
  openSync,
  renameSync,
  rmdirSync,
  unlinkSync,
  writeSync,
} from "node:fs";
import { open } from "node:fs/promises";
import { basename, dirname, join, resolve } from "node:path";

/** Writes all of `data` to an open descriptor and fsyncs it. */
function writeAllAndSync(fd: number, data: Uint8Array | string): void {
  const bytes = typeof data === "string" ? Buffer.from(data, "utf8") : data;
  let done = 0;
  while (done < bytes.length) {
    done += writeSync(fd, bytes, done, bytes.length - done);
  }
  fsyncSync(fd);
}

/** Best-effort fsync of a directory so that a rename inside it is durable. */
function syncDir(dir: string): void {
  let fd: number | undefined;
  try {
    fd = openSync(dir, "r");
    fsyncSync(fd);
  } catch {
    // Some platforms cannot open or fsync a directory; durability of the
    // rename is then up to the file system. Atomicity does not depend on it.
  } finally {
    if (fd !== undefined) closeSync(fd);
  }
}

function removeQuietly(path: string): void {
  try {
    unlinkSync(path);
  } catch {
    // already gone
  }
}

/** Writes a file to `path` under a temporary name and fsyncs it (no rename). */
function writeSynced(path: string, data: Uint8Array | string): void {
  const fd = openSync(path, "w", 0o644);
  try {
    writeAllAndSync(fd, data);
  } finally {
    closeSync(fd);
  }
}

/** {@link writeSynced} on libuv's thread pool: the calling thread goes on while the bytes are written and flushed. */
async function writeSyncedInBackground(path: string, bytes: Uint8Array): Promise<void> {
  const fh = await open(path, "w", 0o644);
  try {
    let done = 0;
    while (done < bytes.length) done += (await fh.write(bytes, done, bytes.length - done)).bytesWritten;
    await fh.sync();
  } finally {
    await fh.close();
  }
}

/**
 * Writes `data` (bytes, or a string as UTF-8) to `path` atomically: first to
 * `path + "." + pid + ".tmp"` in the same directory, fsync, then rename over
 * `path`. The directory must exist. On failure the temporary file is removed
 * and the error rethrown; `path` is then untouched.
 */
export function writeFileAtomic(path: string, data: Uint8Array | string): void {
  const tmp = `${path}.${process.pid}.tmp`;
  try {
    writeSynced(tmp, data);
    renameSync(tmp, path);
  } catch (err) {
    removeQuietly(tmp);
    throw err;
  }
  syncDir(dirname(resolve(path)));
}

/** Checks that an output name is a plain file name (no directories). */
function checkName(name: string): void {
  if (name === "" || name === "." || name === ".." || name.includes("/") || name.includes("\\") || name.includes("\0")) {
    throw new RangeError(`output name must be a plain file name, got "${name}"`);
  }
}

/**
 * Stages the files of one run and publishes them together.
 *
 * Files are written (and fsynced) into a staging directory beside the final
 * one, `finalDir + "." + pid + ".tmp"`; {@link OutputStage.commit} creates
 * `finalDir` if needed and renames every staged file into it. Until commit no
 * file exists under a final name, so a run killed before commit leaves only
 * the staging directory. A kill during commit can leave some files published
 * and others not, but never a partly written file under a final name.
 * {@link OutputStage.abort} removes the staged files.
 *
 * The parent directory of `finalDir` is created on the first {@link add}.
 */
export class OutputStage {
  /** Directory the files end up in, as given. */
  readonly finalDir: string;
  /** Staging directory, a sibling of finalDir. */
  readonly stagingDir: string;
  private readonly names = new Set<string>();
  private state: "open" | "committed" | "aborted" = "open";
  /** Writes under way on the thread pool ({@link addInBackground}), by name. */
  private readonly writing = new Map<string, Promise<void>>();

  constructor(finalDir: string) {
    this.finalDir = finalDir;
    const abs = resolve(finalDir);
    this.stagingDir = join(dirname(abs), `${basename(abs)}.${process.pid}.tmp`);
  }

  /** Final path of output `name`: join(finalDir, name). The file exists there only after commit. */
  path(name: string): string {
    checkName(name);
    return join(this.finalDir, name);
  }

  /** Names staged so far, in the order they were first added. */
  get staged(): string[] {
    return [...this.names];
  }

  private checkOpen(): void {
    if (this.state !== "open") throw new Error(`output stage for ${this.finalDir} is already ${this.state}`);
  }

  private ensureStaging(): void {
    mkdirSync(this.stagingDir, { recursive: true });
  }

  /**
   * Path inside the staging directory where a writer of its own may write
   * output `name` before commit; registers the name so that commit publishes it.
   */
  tempPath(name: string): string {
    checkName(name);
    this.checkOpen();
    this.ensureStaging();
    this.names.add(name);
    return join(this.stagingDir, name);
  }

  /** Stages output `name` with `data` (bytes, or a string as UTF-8). Adding a name again replaces it. */
  add(name: string, data: Uint8Array | string): void {
    const tmp = this.tempPath(name);
    writeSynced(tmp, data);
  }

  /**
   * Stages output `name` like {@link add}, but writes and flushes it on
   * libuv's thread pool while this thread goes on; `data` must not change
   * until {@link commitAsync} (or {@link settle}) resolves. A name added
   * again is written after its earlier write.
   */
  addInBackground(name: string, data: Uint8Array | string): void {
    const tmp = this.tempPath(name);
    const bytes = typeof data === "string" ? Buffer.from(data, "utf8") : data;
    const before = this.writing.get(name);
    const p = (before ? before.then(() => {}, () => {}) : Promise.resolve()).then(() => writeSyncedInBackground(tmp, bytes));
    p.catch(() => {}); // reported by commitAsync
    this.writing.set(name, p);
  }

  /** Waits until every background write has finished or failed (call before {@link abort}, so none recreates a file). */
  async settle(): Promise<void> {
    await Promise.allSettled(this.writing.values());
  }

  /** {@link commit} once every background write has finished; rejects with the first write's error (nothing published). */
  async commitAsync(): Promise<string[]> {
    const writes = [...this.writing.values()];
    await this.settle();
    for (const w of writes) await w;
    this.writing.clear();
    return this.commit();
  }

  /**
   * Publishes every staged file: creates finalDir (recursively), renames each
   * staged file to join(finalDir, name), replacing an older file of that name,
   * and removes the staging directory. Returns the final paths.
   */
  commit(): string[] {
    this.checkOpen();
    mkdirSync(this.finalDir, { recursive: true });
    const out: string[] = [];
    for (const name of this.names) {
      const dest = join(this.finalDir, name);
      renameSync(join(this.stagingDir, name), dest);
      out.push(dest);
    }
    syncDir(this.finalDir);
    if (existsSync(this.stagingDir)) rmdirSync(this.stagingDir);
    this.state = "committed";
    return out;
  }

  /** Removes the staged files and the staging directory; nothing is published. Safe to call twice. */
  abort(): void {
    if (this.state === "committed") return;
    for (const name of this.names) removeQuietly(join(this.stagingDir, name));
    try {
      rmdirSync(this.stagingDir);
    } catch {
      // not created, or holds files that are not ours: leave it
    }
    this.names.clear();
    this.state = "aborted";
  }
}
