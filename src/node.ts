/**
 * isofold for Node: everything of the library entry plus the worker_threads
 * executor and the file readers the command line uses.
 *   import { simulate, nodeExecutor, loadProtocol, loadPhantom } from "isofold/node";
 */
export * from "./index.js";
export { nodeExecutor, simulateParallel, type ParallelOptions } from "./engine/node.js";
export { loadProtocol, loadPhantom, readRealNpy, listPresets, fileResolver } from "./cli/inputs.js";
