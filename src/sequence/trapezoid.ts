/**
 * Trapezoidal gradient lobes that honour the hardware's maximum amplitude and
 * slew rate, on a gradient raster.
 */

/** Gradient raster time (s): every ramp and plateau is a whole number of these. Common practice: 10 µs. */
export const GRAD_RASTER = 10e-6;

export interface Trapezoid {
  /** Signed amplitude of the plateau (T/m). */
  amplitude: number;
  /** Ramp time, up and down each (s). */
  ramp: number;
  /** Plateau time (s). */
  flat: number;
  /** ramp + flat + ramp (s). */
  duration: number;
  /** Signed area (T·s/m) = amplitude · (ramp + flat). */
  area: number;
}

function raster(t: number): number {
  return Math.ceil(t / GRAD_RASTER - 1e-9) * GRAD_RASTER;
}

/**
 * Shortest trapezoid of the given signed area (T·s/m) under gmax (T/m) and
 * slew (T/m/s): a triangle when |area| ≤ gmax²/slew, else a plateau at gmax
 * (Bernstein, King & Zhou 2004, Handbook of MRI Pulse Sequences, ch. 7).
 * Times are rounded up to the raster and the amplitude lowered to keep the
 * area exact.
 */
export function minTrapezoid(area: number, gmax: number, slew: number): Trapezoid {
  const a = Math.abs(area);
  if (a === 0) return { amplitude: 0, ramp: 0, flat: 0, duration: 0, area: 0 };
  let ramp: number, flat: number;
  if (a <= (gmax * gmax) / slew) {
    ramp = raster(Math.sqrt(a / slew));
    flat = 0;
  } else {
    ramp = raster(gmax / slew);
    flat = raster(a / gmax - ramp);
  }
  const amplitude = (Math.sign(area) * a) / (ramp + flat);
  return { amplitude, ramp, flat, duration: 2 * ramp + flat, area };
}

/** Ramp time (s) to reach amplitude g (T/m) at the slew limit, on the raster. */
export function rampTime(g: number, slew: number): number {
  return raster(Math.abs(g) / slew);
}
