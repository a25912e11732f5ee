/**
 * User-facing errors. A UserError is a problem with an input file or flag: the
 * CLI prints its one-line message and exits with code 2, never a stack trace.
 * The message names the file, the key path (e.g. `shapes[2].radius`), what was
 * wrong and what is allowed.
 */
export class UserError extends Error {
  readonly file: string | undefined;
  readonly keyPath: string | undefined;
  /** The message without the file and key path prefix. */
  readonly detail: string;
  constructor(message: string, file?: string, keyPath?: string) {
    const where = [file, keyPath].filter((s) => s !== undefined && s !== "").join(": ");
    super(where ? `${where}: ${message}` : message);
    this.name = "UserError";
    this.file = file;
    this.keyPath = keyPath;
    this.detail = message;
  }

  /** The same error attributed to a file, if it names none yet. */
  inFile(file: string): UserError {
    return this.file ? this : new UserError(this.detail, file, this.keyPath);
  }
}

/** Where a value came from, for error messages. */
export interface Origin {
  file?: string;
  path?: string;
}

export function userError(origin: Origin, message: string): UserError {
  return new UserError(message, origin.file, origin.path);
}

/** Joins a key path: joinPath("shapes[2]", "radius") → "shapes[2].radius". */
export function joinPath(base: string | undefined, key: string | number): string {
  if (typeof key === "number") return `${base ?? ""}[${key}]`;
  return base ? `${base}.${key}` : key;
}
