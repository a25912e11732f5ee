/**
 * 2D spin echo, Cartesian. One TR:
 *   excitation (x) | slice rephaser + crusher | refocusing (y, CPMG phase) |
 *   crusher + phase encode + read prephaser | readout | delay | ideal spoil.
 * Crushers of equal area on both sides of the refocusing pulse leave the
 * refocused pathway untouched and dephase the pulse's own FID.
 * The refocusing pulse's centre lies at TE/2 after the excitation's centre.
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import {
  commonDerived, Demand, lobes, maxPhaseArea, phasePlan, pushPulse, pushReadout, pushReadoutSilent, readoutPlan,
  requireAtLeast, sliceSelect,
} from "./common.js";
import type { Block, Sequence, SequenceDefinition } from "./types.js";

export function buildSe(p: Protocol): Sequence {
  const demand = new Demand();
  const ro = readoutPlan(p);
  demand.add(0, ro.gradient, ro.ramp);
  const pe = phasePlan(p);
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip, undefined, undefined, demand);
  const ref = sliceSelect(p, 1, "refocusing", p.refocusing, p.refocusFlip, undefined, undefined, demand);
  const crush = p.crusherCycles / (GAMMA_BAR * p.slice.thickness);

  const maxPe = maxPhaseArea(pe);
  const before = lobes([0, 0, crush - exc.areaAfterCentre], p, demand);
  const after = lobes([ro.prephaser, maxPe, crush], p, demand);
  const half1 = exc.afterCentre + before.duration + ref.toCentre;
  const half2 = ref.afterCentre + after.duration + ro.toEcho;
  const teMin = 2 * Math.max(half1, half2);
  requireAtLeast("te", p.te, teMin);
  const d1 = p.te / 2 - half1;
  const d2 = p.te / 2 - half2;
  const active = exc.toCentre + p.te + ro.afterEcho;
  const trMin = active;
  requireAtLeast("tr", p.tr, trMin, `at te ${(p.te * 1e3).toFixed(2)} ms`);
  const trDelay = p.tr - trMin;

  const blocks: Block[] = [];
  const total = p.dummyScans + pe.acquired * p.averages;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const line = acq >= 0 ? pe.order[Math.floor(acq / p.averages)]! : pe.centre;
    const peArea = (line - pe.centre) * pe.step;
    pushPulse(blocks, exc, 0);
    blocks.push({ kind: "free", duration: before.duration + d1, area: [0, 0, crush - exc.areaAfterCentre] });
    pushPulse(blocks, ref, Math.PI / 2);
    blocks.push({ kind: "free", duration: after.duration + d2, area: [ro.prephaser, peArea, crush] });
    if (acq >= 0) pushReadout(blocks, ro, line, 0, 1 / p.averages);
    else pushReadoutSilent(blocks, ro);
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    blocks.push({ kind: "spoil" });
  }
  const derived = commonDerived(p, ro, pe, exc, demand);
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: trMin, unit: "s", note: "at the TE chosen" };
  derived["crusherArea"] = { value: crush, unit: "T·s/m" };
  derived["prephaserDuration"] = { value: after.duration, unit: "s" };
  derived["prephaserReadAmplitude"] = { value: after.trap[0]!.amplitude, unit: "T/m" };
  derived["scanTime"] = { value: total * p.tr, unit: "s" };
  return {
    name: "2D spin echo",
    pulses: [exc.pulse, ref.pulse],
    blocks,
    kspace: { slice: 1, phase: pe.lines, read: ro.samples },
    image: { slice: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin, te: p.te, tr: p.tr, scanTime: total * p.tr },
    derived,
    quantities: { sliceGradient: exc.pulse.gradient, refocusGradient: ref.pulse.gradient },
    grid: {
      read: ro.full, offset: ro.offset, reversed: ro.polarity < 0 ? new Uint8Array(pe.lines).fill(1) : null,
      partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD: false,
    },
    phaseTable: Array.from(pe.order, (line) => ({ line, area: (line - pe.centre) * pe.step })),
    activeTime: active,
  };
}

export const SE: SequenceDefinition = {
  name: "se", description: "2D spin echo", build: buildSe,
  defaults: { flip: Math.PI / 2, echoTrainLength: 1 }, refocuses: () => true, spoils: true, threeD: false,
};
