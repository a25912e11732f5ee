/**
 * Preview bundle only: an in-memory file table standing in for node:fs, so
 * the CLI's own readers (protocol presets and `extend`, phantom files) run
 * unchanged in the page. Files are put here by the worker; nothing is
 * fetched or written by this module.
 */
const files = new Map<string, string>();

export function putFile(path: string, text: string): void {
  files.set(path, text);
}
function isDir(path: string): boolean {
  const p = path.endsWith("/") ? path : `${path}/`;
  for (const k of files.keys()) if (k.startsWith(p)) return true;
  return false;
}
function enoent(path: string): Error {
  return Object.assign(new Error(`ENOENT: no such file, open '${path}'`), { code: "ENOENT" });
}
export function readFileSync(path: string): string {
  const t = files.get(String(path));
  if (t === undefined) throw enoent(String(path));
  return t;
}
export function existsSync(path: string): boolean {
  return files.has(String(path)) || isDir(String(path));
}
export function readdirSync(path: string): string[] {
  const p = String(path).endsWith("/") ? String(path) : `${String(path)}/`;
  const out = new Set<string>();
  for (const k of files.keys()) if (k.startsWith(p)) out.add(k.slice(p.length).split("/")[0]!);
  return [...out];
}
export function statSync(path: string): { isDirectory(): boolean; isFile(): boolean; size: number } {
  if (!existsSync(path)) throw enoent(String(path));
  return { isDirectory: () => isDir(String(path)), isFile: () => files.has(String(path)), size: (files.get(String(path)) ?? "").length };
}
function unavailable(): never {
  throw new Error("the previewer page writes no files");
}
export const writeFileSync = unavailable, mkdirSync = unavailable, renameSync = unavailable, rmSync = unavailable, openSync = unavailable,
  closeSync = unavailable, writeSync = unavailable, fsyncSync = unavailable, unlinkSync = unavailable, mkdtempSync = unavailable,
  readSync = unavailable, rmdirSync = unavailable, linkSync = unavailable, lstatSync = statSync, realpathSync = (p: string) => p, createWriteStream = unavailable, createReadStream = unavailable;
export const constants = {};
export const promises = {};
export default { readFileSync, existsSync, readdirSync, statSync, writeFileSync, mkdirSync, renameSync, rmSync, constants, promises };
