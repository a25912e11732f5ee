/**
 * 2D balanced steady-state free precession. Every gradient axis is fully
 * refocused within each TR, so the net zeroth moment over a TR is zero on
 * read, phase and slice; the RF phase alternates 0, π, 0, … and the receiver
 * follows it. One TR:
 *   slice ramp, α, ramp | delay | read prephaser + phase encode + slice rephaser |
 *   readout | read rewinder + phase rewinder + slice prewinder for the next pulse | delay.
 * Steady state is approached by `dummyScans` TRs and, with
 * ssfpPreparation "half-alpha", an α/2 pulse of opposite phase TR/2 before the
 * first α, which puts the magnetization near the ±α/2 steady-state tilt at once
 * (the preparation described in Scheffler & Lehnhardt 2003, Eur Radiol 13:2409).
 * Steady-state signal: Freeman & Hill 1971, JMR 4:366 (see test/sequence-bssfp).
 */
import type { Protocol } from "../protocol/types.js";
import {
  commonDerived, Demand, lobes, maxPhaseArea, phasePlan, pushPulse, pushReadout, pushReadoutSilent, readoutPlan,
  requireAtLeast, sliceSelect,
} from "./common.js";
import type { Block, Sequence, SequenceDefinition } from "./types.js";

export function buildBssfp(p: Protocol): Sequence {
  const demand = new Demand();
  const ro = readoutPlan(p);
  demand.add(0, ro.gradient, ro.ramp);
  const pe = phasePlan(p);
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip, undefined, undefined, demand);
  const maxPe = maxPhaseArea(pe);
  const prep = lobes([ro.prephaser, maxPe, -exc.areaAfterCentre], p, demand);
  const rewindRead = -(ro.prephaser + ro.lobeArea);
  const rew = lobes([rewindRead, maxPe, -exc.areaBeforeCentre], p, demand);
  const teMin = exc.afterCentre + prep.duration + ro.toEcho;
  requireAtLeast("te", p.te, teMin);
  const teDelay = p.te - teMin;
  const active = exc.duration + teDelay + prep.duration + ro.duration + rew.duration;
  requireAtLeast("tr", p.tr, active, `at te ${(p.te * 1e3).toFixed(2)} ms`);
  const trDelay = p.tr - active;

  const blocks: Block[] = [];
  const pulses = [exc.pulse];
  if (p.ssfpPreparation === "half-alpha") {
    const half = sliceSelect(p, 1, "half-alpha preparation", p.excitation, p.flip / 2);
    pulses.push(half.pulse);
    const gap = p.tr / 2 - half.afterCentre - exc.toCentre;
    requireAtLeast("tr", p.tr, 2 * (half.afterCentre + exc.toCentre), "the α/2 preparation needs");
    pushPulse(blocks, half, Math.PI);
    blocks.push({ kind: "free", duration: gap, area: [0, 0, -half.areaAfterCentre - exc.areaBeforeCentre] });
  }
  const total = p.dummyScans + pe.acquired * p.averages;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const line = acq >= 0 ? pe.order[Math.floor(acq / p.averages)]! : pe.centre;
    const peArea = (line - pe.centre) * pe.step;
    const phase = n % 2 === 0 ? 0 : Math.PI;
    pushPulse(blocks, exc, phase);
    if (teDelay > 0) blocks.push({ kind: "free", duration: teDelay, area: [0, 0, 0] });
    blocks.push({ kind: "free", duration: prep.duration, area: [ro.prephaser, peArea, -exc.areaAfterCentre] });
    if (acq >= 0) pushReadout(blocks, ro, line, phase, 1 / p.averages);
    else pushReadoutSilent(blocks, ro);
    blocks.push({ kind: "free", duration: rew.duration, area: [rewindRead, -peArea, -exc.areaBeforeCentre] });
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
  }
  const derived = commonDerived(p, ro, pe, exc, demand);
  const scanTime = total * p.tr + (p.ssfpPreparation === "half-alpha" ? p.tr / 2 : 0);
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: active, unit: "s", note: "at the TE chosen" };
  derived["prephaserDuration"] = { value: prep.duration, unit: "s" };
  derived["prephaserReadAmplitude"] = { value: prep.trap[0]!.amplitude, unit: "T/m" };
  derived["bandSpacing"] = { value: 1 / p.tr, unit: "Hz", note: "dark bands at Δf = (k + ½)/TR for alternating RF (Freeman & Hill 1971)" };
  derived["scanTime"] = { value: scanTime, unit: "s" };
  return {
    name: "2D balanced SSFP",
    pulses,
    blocks,
    kspace: { slice: 1, phase: pe.lines, read: ro.samples },
    image: { slice: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin: active, te: p.te, tr: p.tr, scanTime },
    derived,
    quantities: { sliceGradient: exc.pulse.gradient },
    grid: {
      read: ro.full, offset: ro.offset, reversed: ro.polarity < 0 ? new Uint8Array(pe.lines).fill(1) : null,
      partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD: false,
    },
    phaseTable: Array.from(pe.order, (line) => ({ line, area: (line - pe.centre) * pe.step })),
    activeTime: active,
  };
}

export const BSSFP: SequenceDefinition = {
  name: "bssfp", description: "2D balanced steady-state free precession", build: buildBssfp,
  defaults: { flip: (20 * Math.PI) / 180, echoTrainLength: 1 }, refocuses: () => false, spoils: false, threeD: false,
};
