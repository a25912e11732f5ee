/**
 * The output folder of a command, checked before any work, and a lock so that
 * two runs never write into one folder at once.
 *
 * checkOutputDir: `--out` must name a folder (new or existing) whose nearest
 * existing ancestor is a folder we can create entries in. It names an
 * existing file, a path through a file, or a place we cannot write to →
 * UserError (one line, exit 2) before anything is simulated. Writability is
 * probed by creating and removing an empty file, because permission bits do
 * not tell the whole story (read-only mounts, /proc, root).
 *
 * lockOutputDir: `<out>.lock`, a sibling of the folder, created with O_EXCL
 * and holding the owner's PID. A second run into the same folder while the
 * owner lives is refused with a UserError naming the PID. A lock whose PID is
 * dead (a run killed by SIGKILL or a power cut leaves its lock behind) is
 * taken over, and the dead run's staging folders (`<out>.<pid>.tmp`, and
 * `*.<pid>.tmp` inside the folder) are removed. The lock is released when
 * the command ends, also on an error or Ctrl-C; the parent folders created
 * for it are removed again when the command wrote nothing.
 */
import { closeSync, existsSync, linkSync, mkdirSync, openSync, readdirSync, readFileSync, renameSync, rmdirSync, rmSync, statSync, unlinkSync, writeSync } from "node:fs";
import { basename, dirname, join, resolve } from "node:path";
import { UserError } from "../errors.js";

function code(e: unknown): string | undefined {
  return (e as NodeJS.ErrnoException).code;
}

/** Nearest existing ancestor of `abs` (itself included) and the path parts below it that do not exist yet. */
function nearestExisting(abs: string): { base: string; missing: string[] } {
  const missing: string[] = [];
  let p = abs;
  for (;;) {
    try {
      statSync(p);
      return { base: p, missing };
    } catch (e) {
      if (code(e) === "ENOTDIR") {
        // a file somewhere above: found while walking up
      } else if (code(e) !== "ENOENT") {
        throw new UserError(`cannot use ${p} for the output: ${(e as Error).message}`, undefined, "--out");
      }
    }
    const up = dirname(p);
    if (up === p) return { base: p, missing };
    missing.unshift(basename(p));
    p = up;
  }
}

/** Creates and removes an empty file in `dir`: true if that works. */
function canCreateIn(dir: string): { ok: true } | { ok: false; why: string } {
  const probe = join(dir, `.isofold-probe-${process.pid}-${Date.now()}`);
  try {
    closeSync(openSync(probe, "wx", 0o600));
  } catch (e) {
    const c = code(e);
    return { ok: false, why: c === "EACCES" || c === "EPERM" ? "permission denied" : c === "EROFS" ? "read-only file system" : c === "ENOSPC" ? "no space left on the device" : (e as Error).message };
  }
  try {
    unlinkSync(probe);
  } catch {
    /* gone already */
  }
  return { ok: true };
}

/**
 * Checks that `out` can become (or already is) a folder this process can
 * write into, before any work. Throws a UserError saying what would work.
 * `flag` names the option in messages.
 */
export function checkOutputDir(out: string, flag = "--out"): void {
  if (out.trim() === "") throw new UserError(`give an output folder, e.g. ${flag} out/run`, undefined, flag);
  if (out.includes("\0")) throw new UserError(`the folder name holds a NUL character`, undefined, flag);
  const abs = resolve(out);
  const { base, missing } = nearestExisting(abs);
  const st = statSync(base);
  if (!st.isDirectory()) {
    if (missing.length === 0) {
      throw new UserError(`${out} is an existing file, not a folder; name a new or existing folder (the run writes several files into it)`, undefined, flag);
    }
    throw new UserError(`${base} is a file, so no folder can be made below it for ${out}; choose another output folder`, undefined, flag);
  }
  // the folder itself (when it exists) and the place its staging sibling goes must both take new entries
  const parentAbs = dirname(abs);
  const places = missing.length === 0 ? [abs, parentAbs] : [base];
  for (const dir of new Set(places)) {
    const r = canCreateIn(dir);
    if (!r.ok) throw new UserError(`cannot write into ${dir} (${r.why}); choose an output folder you can write to`, undefined, flag);
  }
}

/** True if a process with this PID exists (EPERM: it exists but is not ours). */
export function pidAlive(pid: number): boolean {
  if (!Number.isInteger(pid) || pid <= 0) return false;
  try {
    process.kill(pid, 0);
    return true;
  } catch (e) {
    return code(e) === "EPERM";
  }
}

function readLockPid(lock: string): number | null {
  try {
    const m = /^(\d+)/.exec(readFileSync(lock, "utf8"));
    return m ? Number(m[1]) : null;
  } catch {
    return null;
  }
}

/** Removes the staging folders and temporary files a dead run `pid` left for `abs`. */
function removeLeftovers(abs: string, pid: number): void {
  const suffix = `.${pid}.tmp`;
  rmSync(`${abs}${suffix}`, { recursive: true, force: true });
  try {
    for (const f of readdirSync(abs)) if (f.endsWith(suffix)) rmSync(join(abs, f), { recursive: true, force: true });
  } catch {
    /* no folder yet */
  }
}

function sleepMs(ms: number): void {
  Atomics.wait(new Int32Array(new SharedArrayBuffer(4)), 0, 0, ms);
}

/** A held lock on an output folder. */
export interface OutputLock {
  /** Path of the lock file. */
  readonly path: string;
  /** PID of the dead run whose lock was taken over, if any. */
  readonly tookOverFrom: number | null;
  /** Removes the lock (and the parent folders created for it if they are empty). Safe to call twice. */
  release(): void;
}

/**
 * Takes the lock `<out>.lock` for this process (see the file comment).
 * Throws a UserError when a live process holds it.
 */
export function lockOutputDir(out: string, flag = "--out"): OutputLock {
  const abs = resolve(out);
  const lock = `${abs}.lock`;
  const { missing } = nearestExisting(dirname(abs));
  const created: string[] = [];
  let p = dirname(abs);
  for (let k = missing.length; k > 0; k--) {
    created.unshift(p);
    p = dirname(p);
  }
  mkdirSync(dirname(abs), { recursive: true });
  const body = `${process.pid}\nisofold output lock for ${abs}; removed when the run ends; a lock whose process is gone is taken over\n`;
  let tookOverFrom: number | null = null;
  const cleanupCreated = () => {
    for (const d of [...created].reverse()) {
      try {
        rmdirSync(d);
      } catch {
        break;
      }
    }
  };
  for (let attempt = 0; ; attempt++) {
    try {
      const fd = openSync(lock, "wx", 0o644);
      try {
        writeSync(fd, body);
      } finally {
        closeSync(fd);
      }
      break;
    } catch (e) {
      if (code(e) !== "EEXIST") {
        cleanupCreated();
        throw new UserError(`cannot create the lock file ${lock}: ${(e as Error).message}`, undefined, flag);
      }
    }
    const owner = readLockPid(lock);
    // no PID yet: the owner may be between creating and writing the file; look again shortly
    if (owner === null && attempt < 3) {
      sleepMs(50);
      continue;
    }
    // our own PID counts as alive: another run in this process holds the folder
    if ((owner !== null && pidAlive(owner)) || attempt >= 6) {
      cleanupCreated();
      throw new UserError(
        `another isofold run (process ${owner ?? "unknown"}) is writing to ${out}; wait for it to finish or choose another output folder ` +
          `(if no such run exists, delete ${lock})`,
        undefined, flag,
      );
    }
    // stale: move it aside under a name of our own (atomic), then check that what we moved is still the stale lock
    const aside = `${lock}.${process.pid}.stale`;
    try {
      renameSync(lock, aside);
    } catch {
      continue; // someone else moved or removed it: try again
    }
    const moved = readLockPid(aside);
    if (moved !== owner && moved !== null && pidAlive(moved)) {
      // we moved a fresh lock another run had just taken: put it back and refuse
      try {
        linkSync(aside, lock);
      } catch {
        /* a third run holds it now */
      }
      rmSync(aside, { force: true });
      cleanupCreated();
      throw new UserError(`another isofold run (process ${moved}) is writing to ${out}; wait for it to finish or choose another output folder`, undefined, flag);
    }
    rmSync(aside, { force: true });
    if (owner !== null) {
      removeLeftovers(abs, owner);
      tookOverFrom = owner;
    }
  }
  let released = false;
  const onExit = () => release();
  function release(): void {
    if (released) return;
    released = true;
    process.removeListener("exit", onExit);
    if (readLockPid(lock) === process.pid) rmSync(lock, { force: true });
    if (!existsSync(abs)) cleanupCreated();
  }
  process.on("exit", onExit);
  return { path: lock, tookOverFrom, release };
}

/**
 * Checks `out` (checkOutputDir), takes its lock and runs `fn`; the lock is
 * released when `fn` settles. The one call each writing command makes first.
 */
export async function withOutputDir<T>(out: string, fn: () => Promise<T> | T, flag = "--out"): Promise<T> {
  checkOutputDir(out, flag);
  const lock = lockOutputDir(out, flag);
  try {
    return await fn();
  } catch (e) {
    const c = code(e);
    if (c !== undefined && (WRITE_FAILURES as Record<string, string>)[c] !== undefined) throw new OutputWriteError(out, c);
    throw e;
  } finally {
    lock.release();
  }
}

/** Errors of the system, not of the inputs, that stop the output from being written. */
const WRITE_FAILURES = {
  ENOSPC: "no space left on the device",
  EDQUOT: "the disk quota is used up",
  EFBIG: "a file grew beyond what the file system allows",
  EROFS: "the file system became read-only",
};

/** Exit code of a run whose output could not be written (disk full, quota, read-only): not a user error (2), not a bug (1). */
export const EXIT_WRITE_FAILED = 3;

/**
 * The output could not be written for a reason of the system (see
 * WRITE_FAILURES). The staged files have been removed; nothing was published
 * under a final name by the write that failed. The CLI prints one line and
 * exits with EXIT_WRITE_FAILED.
 */
export class OutputWriteError extends Error {
  readonly code: string;
  constructor(out: string, c: string) {
    super(`cannot write the output to ${out}: ${(WRITE_FAILURES as Record<string, string>)[c]} (${c}); the partly written files were removed; free some space or choose another output folder and run again`);
    this.name = "OutputWriteError";
    this.code = c;
  }
}
