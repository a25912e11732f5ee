/**
 * 2D spoiled gradient echo, Cartesian. One TR:
 *   slice-select ramp, excitation, ramp | delay | slice rephaser + phase
 *   encode + read prephaser (concurrent) | readout | phase rewinder + slice
 *   spoiler | delay to TR | ideal spoil (if chosen).
 * TE is measured from the excitation's centre to the k = 0 sample.
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import {
  commonDerived, lobes, phasePlan, pushPulse, pushReadout, readoutPlan, requireAtLeast, rfSpoilPhase, sliceSelect,
} from "./common.js";
import type { Block, Sequence } from "./types.js";

export function buildGre(p: Protocol): Sequence {
  const ro = readoutPlan(p);
  const pe = phasePlan(p);
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip);
  const g = exc.pulse.gradient;

  const maxPe = Math.max(pe.centre, pe.lines - 1 - pe.centre) * pe.step;
  const prep = lobes([-ro.areaToEcho, maxPe, -exc.areaAfterCentre], p);
  const teMin = exc.pulse.duration - exc.pulse.centre + exc.ramp + prep.duration + ro.ramp + ro.echoSample * ro.dwell;
  requireAtLeast("te", p.te, teMin);
  const teDelay = p.te - teMin;

  const spoilArea = p.spoiling === "none" ? 0 : p.spoilerCycles / (GAMMA_BAR * p.slice.thickness);
  const post = lobes([0, maxPe, spoilArea], p);
  const trMin = exc.ramp + exc.pulse.centre + teMin + (ro.samples - ro.echoSample) * ro.dwell + ro.ramp + post.duration;
  // TR runs from one excitation centre to the next; the TR starts at the ramp before the pulse.
  requireAtLeast("tr", p.tr, trMin + teDelay);
  const trDelay = p.tr - trMin - teDelay;

  const blocks: Block[] = [];
  const total = p.dummyScans + pe.lines * p.averages;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const line = acq >= 0 ? pe.order[Math.floor(acq / p.averages)]! : pe.centre;
    const peArea = (line - pe.centre) * pe.step;
    const phase = p.spoiling === "rf" ? rfSpoilPhase(n, p.rfSpoilIncrement) : 0;
    pushPulse(blocks, exc, phase);
    if (teDelay > 0) blocks.push({ kind: "free", duration: teDelay, area: [0, 0, 0] });
    blocks.push({ kind: "free", duration: prep.duration, area: [-ro.areaToEcho, peArea, -exc.areaAfterCentre] });
    if (acq >= 0) pushReadout(blocks, ro, line, phase, 1 / p.averages);
    else blocks.push({ kind: "free", duration: 2 * ro.ramp + ro.flat, area: [ro.gradient * (ro.ramp + ro.flat), 0, 0] });
    blocks.push({ kind: "free", duration: post.duration, area: [0, -peArea, spoilArea] });
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    if (p.spoiling === "ideal") blocks.push({ kind: "spoil" });
  }
  void g;
  const derived = commonDerived(p, ro, pe, exc);
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: trMin + teDelay, unit: "s", note: "at the TE chosen" };
  derived["prephaserDuration"] = { value: prep.duration, unit: "s" };
  derived["prephaserReadAmplitude"] = { value: prep.trap[0]!.amplitude, unit: "T/m" };
  derived["scanTime"] = { value: total * p.tr, unit: "s" };
  return {
    name: "2D spoiled gradient echo",
    pulses: [exc.pulse],
    blocks,
    kspace: { partitions: 1, phase: pe.lines, read: ro.samples },
    image: { partitions: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin: trMin + teDelay, te: p.te, tr: p.tr, scanTime: total * p.tr },
    derived,
  };
}
