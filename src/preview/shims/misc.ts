/**
 * Preview bundle only: stand-ins for the Node modules that the CLI modules
 * import but the page never calls (worker threads, child processes, the
 * machine's memory, hashing of shard files). Calling one is an internal error.
 */
function unavailable(): never {
  throw new Error("not available in the previewer page");
}
export const fileURLToPath = (u: string) => String(u).replace(/^file:\/\//, "");
export const pathToFileURL = (p: string) => new URL(`file://${p}`);
export const totalmem = () => 8 * 2 ** 30;
export const freemem = () => 8 * 2 ** 30;
export const availableParallelism = () => 1;
export const cpus = () => [{}];
export const tmpdir = () => "/tmp";
export const EOL = "\n";
export const platform = () => "browser";
export class Worker {
  constructor() {
    unavailable();
  }
}
export const parentPort = null, workerData = null, isMainThread = true;
export const createHash = unavailable, randomBytes = unavailable, spawn = unavailable, spawnSync = unavailable, execFileSync = unavailable;
export const gzipSync = unavailable, deflateSync = unavailable, inflateSync = unavailable, constants = {};
export const inspect = (v: unknown) => String(v), promisify = unavailable, format = (...a: unknown[]) => a.join(" ");
export class PNG {
  constructor() {
    unavailable();
  }
  static sync = { write: unavailable, read: unavailable };
}
export default {};
