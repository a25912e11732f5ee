/** Preview bundle only: the POSIX half of node:path that the CLI's readers use. */
function norm(parts: string[]): string {
  const out: string[] = [];
  for (const s of parts) {
    if (s === "" || s === ".") continue;
    if (s === "..") out.pop();
    else out.push(s);
  }
  return `/${out.join("/")}`;
}
export const sep = "/";
export function isAbsolute(p: string): boolean {
  return p.startsWith("/");
}
export function resolve(...ps: string[]): string {
  let acc = "/";
  for (const p of ps) acc = isAbsolute(p) ? p : `${acc}/${p}`;
  return norm(acc.split("/"));
}
export function join(...ps: string[]): string {
  const j = ps.join("/");
  return isAbsolute(j) ? norm(j.split("/")) : norm(j.split("/")).slice(1);
}
export function dirname(p: string): string {
  const i = p.replace(/\/+$/, "").lastIndexOf("/");
  return i <= 0 ? (p.startsWith("/") ? "/" : ".") : p.slice(0, i);
}
export function basename(p: string, ext?: string): string {
  const b = p.replace(/\/+$/, "").split("/").pop() ?? "";
  return ext && b.endsWith(ext) ? b.slice(0, -ext.length) : b;
}
export function extname(p: string): string {
  const b = basename(p);
  const i = b.lastIndexOf(".");
  return i > 0 ? b.slice(i) : "";
}
export function relative(from: string, to: string): string {
  return to.startsWith(`${from}/`) ? to.slice(from.length + 1) : to;
}
export const posix = { sep, isAbsolute, resolve, join, dirname, basename, extname, relative };
export default posix;
