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
    super(oneLine(where ? `${where}: ${message}` : message));
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

/**
 * A user error is printed as one line: line breaks and other control
 * characters (from key names or values in a file) are shown escaped.
 */
function oneLine(s: string): string {
  // eslint-disable-next-line no-control-regex
  return s.replace(/[\u0000-\u001f\u007f\u2028\u2029]/g, (c) => (c === "\n" ? "\\n" : c === "\t" ? " " : `\\u${c.charCodeAt(0).toString(16).padStart(4, "0")}`));
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
