/**
 * Helper thread of the fast readout operator (worker_threads). Messages: a
 * run's shared buffers (engine/fast-phase.ts PhaseShared: the thread
 * transforms the blocks the main thread hands over until the run ends, then
 * waits for the next run); a memory reserve to write ahead (touchReserve).
 * Loaded as compiled JavaScript.
 */
import { parentPort } from "node:worker_threads";
import { phaseHelperLoop, touchReserve, type PhaseShared } from "./fast-phase.js";

parentPort!.on("message", (m: PhaseShared | { touch: SharedArrayBuffer; ctrl: SharedArrayBuffer }) => {
  if ("touch" in m) touchReserve(m.touch, m.ctrl);
  else phaseHelperLoop(m);
});
