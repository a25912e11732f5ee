/**
 * Helper thread of the fast readout operator (worker_threads). Messages: a
 * run's shared buffers (engine/fast-phase.ts PhaseShared: the thread
 * transforms the blocks the main thread hands over until the run ends, then
 * waits for the next run); a memory reserve to write ahead (touchReserve);
 * a request to warm up (warmUp). Loaded as compiled JavaScript.
 */
import { parentPort } from "node:worker_threads";
import { phaseHelperLoop, touchReserve, warmUp, type PhaseShared } from "./fast-phase.js";

let warming = false;
let step: (() => boolean) | null = null;
const tick = (): void => {
  if (warming && step!()) setImmediate(tick);
};
parentPort!.on("message", (m: PhaseShared | { touch: SharedArrayBuffer; ctrl: SharedArrayBuffer } | { warm: true }) => {
  if ("warm" in m) {
    // started ahead of a run (fast-node.ts prestartPhaseHelper): the thread's code optimised on made-up data,
    // a step at a time between messages
    if (step === null) {
      step = warmUp();
      warming = true;
      setImmediate(tick);
    }
  } else if ("touch" in m) touchReserve(m.touch, m.ctrl);
  else {
    // a run warms the code itself
    warming = false;
    phaseHelperLoop(m);
  }
});
