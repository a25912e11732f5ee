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
import { commonDerived, lobes, phasePlan, pushPulse, pushReadout, readoutPlan, requireAtLeast, sliceSelect } from "./common.js";
import type { Block, Sequence } from "./types.js";

export function buildSe(p: Protocol): Sequence {
  const ro = readoutPlan(p);
  const pe = phasePlan(p);
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip);
  const ref = sliceSelect(p, 1, "refocusing", p.refocusing, p.refocusFlip);
  const crush = p.crusherCycles / (GAMMA_BAR * p.slice.thickness);

  const maxPe = Math.max(pe.centre, pe.lines - 1 - pe.centre) * pe.step;
  const before = lobes([0, 0, crush - exc.areaAfterCentre], p);
  const after = lobes([-ro.areaToEcho, maxPe, crush], p);
  const half1 = exc.pulse.duration - exc.pulse.centre + exc.ramp + before.duration + ref.ramp + ref.pulse.centre;
  const half2 = ref.pulse.duration - ref.pulse.centre + ref.ramp + after.duration + ro.ramp + ro.echoSample * ro.dwell;
  const teMin = 2 * Math.max(half1, half2);
  requireAtLeast("te", p.te, teMin);
  const d1 = p.te / 2 - half1;
  const d2 = p.te / 2 - half2;
  const tail = (ro.samples - ro.echoSample) * ro.dwell + ro.ramp;
  const trMin = exc.ramp + exc.pulse.centre + p.te + tail;
  requireAtLeast("tr", p.tr, trMin);
  const trDelay = p.tr - trMin;

  const blocks: Block[] = [];
  const total = p.dummyScans + pe.lines * p.averages;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const line = acq >= 0 ? pe.order[Math.floor(acq / p.averages)]! : pe.centre;
    const peArea = (line - pe.centre) * pe.step;
    pushPulse(blocks, exc, 0);
    blocks.push({ kind: "free", duration: before.duration + d1, area: [0, 0, crush - exc.areaAfterCentre] });
    pushPulse(blocks, ref, Math.PI / 2);
    blocks.push({ kind: "free", duration: after.duration + d2, area: [-ro.areaToEcho, peArea, crush] });
    if (acq >= 0) pushReadout(blocks, ro, line, 0, 1 / p.averages);
    else blocks.push({ kind: "free", duration: 2 * ro.ramp + ro.flat, area: [ro.gradient * (ro.ramp + ro.flat), 0, 0] });
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    blocks.push({ kind: "spoil" });
  }
  const derived = commonDerived(p, ro, pe, exc);
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: trMin, unit: "s", note: "at the TE chosen" };
  derived["crusherArea"] = { value: crush, unit: "T·s/m" };
  derived["scanTime"] = { value: total * p.tr, unit: "s" };
  return {
    name: "2D spin echo",
    pulses: [exc.pulse, ref.pulse],
    blocks,
    kspace: { partitions: 1, phase: pe.lines, read: ro.samples },
    image: { partitions: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin, te: p.te, tr: p.tr, scanTime: total * p.tr },
    derived,
  };
}
