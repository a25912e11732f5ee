/**
 * RF pulse waveforms. A windowed sinc of time-bandwidth product TBW and
 * duration τ has bandwidth BW = TBW/τ; played with slice gradient
 * G = BW/(γ̄·Δz) it selects a slice of thickness Δz (Bernstein, King & Zhou
 * 2004, ch. 2). Amplitudes are scaled so that γ·ΣB1·dt equals the flip angle
 * on resonance, which is exact for a real waveform on resonance.
 */
import { GAMMA, GAMMA_BAR } from "../constants.js";
import type { PulseSpec } from "../protocol/types.js";
import type { RFWaveform } from "./types.js";

function sinc(x: number): number {
  if (x === 0) return 1;
  const px = Math.PI * x;
  return Math.sin(px) / px;
}

/**
 * Builds a pulse: sinc with a Hamming window, or a hard (rectangular) pulse.
 * `sliceThickness` (m) sets the slice gradient for a sinc (0 for a hard pulse,
 * which is non-selective). `position` (m) along the slice axis is reached by
 * modulating B1 at f = γ̄·G·position, with zero phase at the pulse centre.
 */
export function makePulse(
  id: number,
  name: string,
  spec: PulseSpec,
  flip: number,
  sliceThickness: number,
  position: number,
): RFWaveform {
  const n = spec.steps;
  const dt = spec.duration / n;
  const b1re = new Float64Array(n);
  const b1im = new Float64Array(n);
  let gradient = 0;
  if (spec.shape === "hard") {
    for (let s = 0; s < n; s++) b1re[s] = 1;
  } else {
    for (let s = 0; s < n; s++) {
      const t = ((s + 0.5) / n) * 2 - 1; // −1 … 1 over the pulse
      const window = 0.54 + 0.46 * Math.cos(Math.PI * t); // Hamming
      b1re[s] = sinc((spec.tbw / 2) * t) * window;
    }
    gradient = spec.tbw / spec.duration / (GAMMA_BAR * sliceThickness);
  }
  let area = 0;
  for (let s = 0; s < n; s++) area += b1re[s]!;
  const scale = flip / (GAMMA * area * dt);
  const f = GAMMA_BAR * gradient * position;
  const centre = spec.duration / 2;
  for (let s = 0; s < n; s++) {
    const t = (s + 0.5) * dt - centre;
    const a = b1re[s]! * scale;
    // B1(t)·exp(−i2πft): the pulse follows the spins at the slice centre, whose
    // transverse phase turns as exp(−i2πft) in the convention of this program.
    b1re[s] = a * Math.cos(-2 * Math.PI * f * t);
    b1im[s] = a * Math.sin(-2 * Math.PI * f * t);
  }
  return { id, name, dt, b1re, b1im, duration: spec.duration, gradient, flip, centre };
}

/**
 * Reach of a pulse's slice profile (m from the slice centre): the largest
 * distance, searched out to `limit`, at which the small-tip profile
 * |Σ B1(t)·exp(i2πγ̄G·w·t)·dt| (Fourier transform of the waveform; Pauly,
 * Nishimura & Macovski 1989, J Magn Reson 81:43) is still at least `level` of
 * its value at the centre. Infinity for a non-selective pulse (G = 0).
 */
export function profileReach(pulse: RFWaveform, position: number, limit: number, level = 1e-3): number {
  if (pulse.gradient === 0) return Infinity;
  const resp = (w: number, sign: number): number => {
    const f = GAMMA_BAR * pulse.gradient * w;
    let re = 0, im = 0;
    for (let s = 0; s < pulse.b1re.length; s++) {
      const th = sign * 2 * Math.PI * f * (s + 0.5) * pulse.dt;
      const c = Math.cos(th), sn = Math.sin(th);
      re += pulse.b1re[s]! * c - pulse.b1im[s]! * sn;
      im += pulse.b1re[s]! * sn + pulse.b1im[s]! * c;
    }
    return Math.hypot(re, im);
  };
  const sign = resp(position, 1) >= resp(position, -1) ? 1 : -1;
  const peak = resp(position, sign);
  const step = 1 / (4 * GAMMA_BAR * Math.abs(pulse.gradient) * pulse.duration); // a quarter of the profile's finest detail
  let reach = 0;
  for (let d = 0; d <= limit; d += step) {
    if (resp(position + d, sign) >= level * peak || resp(position - d, sign) >= level * peak) reach = d;
  }
  return reach;
}
