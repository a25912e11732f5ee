/**
 * isofold as a library: `import { simulate, parsePhantom, parseProtocol } from "isofold"`.
 * Runs in Node and in a browser (no node:* module, no `process`); the Node
 * extras — worker_threads executor, file readers — are in "isofold/node".
 * isofold is not a medical device; see SAFETY_NOTE.
 */
export {
  simulate, prepareSimulation, runSlices, assembleResult, reconstructRuns, isoOptionsFor, isoGeometry, voxelAffine,
  SAFETY_NOTE, VOLUME_AXES,
  type SimulateInput, type SimulateResult, type SimulateProgress, type Prepared, type SliceRun, type Volume, type AssembleContext,
} from "./api.js";
export { parseProtocol, parseProtocolObject, logicalAxes, slicePositions, SEQUENCES, type Protocol, type ProtocolInput, type ProtocolResolver } from "./protocol/index.js";
export { parsePhantom, parseJsonText, libraryNames, libraryTissue, type Phantom, type RealArray } from "./phantom/index.js";
export { buildSequence, type Sequence } from "./sequence/index.js";
export { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "./isochromats/index.js";
export {
  serialExecutor, simulateWith, simulateSerial, AbortedError, CHUNK_ISOCHROMATS, HAS_SHARED_MEMORY,
  type Executor, type ExecutorSession, type KSpace, type EnginePlan, type RunOptions,
} from "./engine/index.js";
export { UserError } from "./errors.js";
