/**
 * The engine stage for Node: everything of engine/index.ts plus the
 * worker_threads executor (pool.ts). The one engine module that imports node:*.
 */
export * from "./index.js";
// the fast readout operator's helper thread (worker_threads)
import "./fast-node.js";
export { EnginePool, nodeExecutor, simulateParallel, workerPath, type ParallelOptions } from "./pool.js";
