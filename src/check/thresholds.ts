/**
 * The thresholds `isofold check` judges each value against: a "watch" and a
 * "problem" level per key, in the item's unit. They are starting points
 * (common practice, from memory), stated in the output and changeable with
 * --threshold key=watch,problem or key.watch=… / key.problem=…
 */
import { UserError } from "../errors.js";

export type Verdict = "fine" | "watch" | "problem";

export interface Threshold {
  /** Beyond this the verdict is "watch". */
  watch: number;
  /** Beyond this the verdict is "problem". */
  problem: number;
  unit: string;
  /** "above": larger values are worse; "below": smaller values are worse. */
  worse: "above" | "below";
  /** What is compared. */
  meaning: string;
}

export const DEFAULT_THRESHOLDS: Record<string, Threshold> = {
  fatShiftRead: { watch: 1, problem: 2, unit: "px", worse: "above", meaning: "|fat–water shift along read|" },
  fatShiftSlice: { watch: 20, problem: 50, unit: "%", worse: "above", meaning: "|fat–water shift along the slice normal| in % of the slice thickness" },
  fatShiftPhase: { watch: 2, problem: 5, unit: "px", worse: "above", meaning: "|fat–water shift along phase| (EPI)" },
  wrapPhase: { watch: 0, problem: 8, unit: "px", worse: "above", meaning: "rows of the image that receive folded signal along phase" },
  wrapPhaseRoi: { watch: 0, problem: 0, unit: "px", worse: "above", meaning: "pixels of the ROI that receive folded signal along phase" },
  wrapRead: { watch: 0, problem: 8, unit: "px", worse: "above", meaning: "columns of the image that receive folded (or filter-dimmed) signal along read" },
  wrapReadRoi: { watch: 0, problem: 0, unit: "px", worse: "above", meaning: "pixels of the ROI that receive folded signal along read" },
  wrapSlice: { watch: 1, problem: 10, unit: "%", worse: "above", meaning: "largest excitation (small-tip profile, % of the slab centre) of phantom signal that folds along slice encoding" },
  blurRead: { watch: 1.5, problem: 2.5, unit: "px", worse: "above", meaning: "PSF FWHM along read from T2* decay over the readout (1.21 px without decay)" },
  blurPhase: { watch: 1.5, problem: 2.5, unit: "px", worse: "above", meaning: "PSF FWHM along phase from the echo-train modulation (1.21 px without it)" },
  blurPartialFourier: { watch: 1.4, problem: 2, unit: "px", worse: "above", meaning: "PSF FWHM along the partially sampled axis" },
  distortionRead: { watch: 0.5, problem: 2, unit: "px", worse: "above", meaning: "largest |displacement| along read from the B0 model and shim" },
  distortionPhase: { watch: 1, problem: 3, unit: "px", worse: "above", meaning: "largest |displacement| along phase from the B0 model and shim (EPI)" },
  snr: { watch: 0.5, problem: 0.25, unit: "", worse: "below", meaning: "SNR relative to the reference" },
  scanTime: { watch: 600, problem: 1800, unit: "s", worse: "above", meaning: "scan time" },
  gradientHeadroom: { watch: 5, problem: 0, unit: "%", worse: "below", meaning: "smallest margin of peak gradient below gmax over the logical axes" },
  slewHeadroom: { watch: 5, problem: 0, unit: "%", worse: "below", meaning: "smallest margin of peak slew rate below the slew limit over the logical axes" },
};

/** Verdict of a value against a threshold (NaN or null: "fine", nothing to judge). */
export function judge(value: number | null, t: Threshold): Verdict {
  if (value === null || Number.isNaN(value)) return "fine";
  if (t.worse === "above") return value > t.problem ? "problem" : value > t.watch ? "watch" : "fine";
  return value < t.problem ? "problem" : value < t.watch ? "watch" : "fine";
}

/** One line stating a threshold, e.g. "watch > 1 px, problem > 2 px". */
export function thresholdText(t: Threshold): string {
  const op = t.worse === "above" ? ">" : "<";
  const u = t.unit ? (t.unit === "%" ? " %" : ` ${t.unit}`) : "";
  return `watch ${op} ${t.watch}${u}, problem ${op} ${t.problem}${u}`;
}

function parseValue(raw: string, key: string, t: Threshold): number {
  const m = /^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$/.exec(raw);
  if (!m) throw new UserError(`--threshold ${key}: "${raw}" is not a number${t.unit ? ` with unit ${t.unit}` : ""}; e.g. ${key}=${t.watch}${t.unit === "%" ? "%" : t.unit ? " " + t.unit : ""},${t.problem}${t.unit === "%" ? "%" : t.unit ? " " + t.unit : ""}`);
  const unit = m[2] ?? "";
  if (unit !== t.unit) {
    throw new UserError(`--threshold ${key}: "${raw}" ${unit ? `has unit ${unit}` : "has no unit"}; ${key} is in ${t.unit ? t.unit : "plain numbers (no unit)"}, e.g. ${key}=${t.watch}${t.unit ? (t.unit === "%" ? "%" : " " + t.unit) : ""}`);
  }
  return Number(m[1]);
}

/**
 * Applies --threshold overrides: "key=watch,problem", "key.watch=v" or
 * "key.problem=v", values with the key's unit. Unknown keys and bad values are
 * user errors naming what would work.
 */
export function parseThresholds(args: string[]): Record<string, Threshold> {
  const out: Record<string, Threshold> = {};
  for (const [k, t] of Object.entries(DEFAULT_THRESHOLDS)) out[k] = { ...t };
  for (const arg of args) {
    const eq = arg.indexOf("=");
    if (eq < 0) throw new UserError(`--threshold "${arg}": expected key=watch,problem (e.g. fatShiftRead=1.5 px,3 px) or key.watch=value`);
    const lhs = arg.slice(0, eq).trim(), rhs = arg.slice(eq + 1);
    const [key, level] = lhs.split(".", 2) as [string, string | undefined];
    const t = out[key];
    if (!t) throw new UserError(`--threshold: unknown key "${key}"; known keys: ${Object.keys(DEFAULT_THRESHOLDS).join(", ")}`);
    if (level !== undefined && level !== "watch" && level !== "problem") {
      throw new UserError(`--threshold ${lhs}: unknown level "${level}"; use ${key}.watch or ${key}.problem`);
    }
    if (level) {
      t[level] = parseValue(rhs, key, t);
    } else {
      const parts = rhs.split(",");
      if (parts.length !== 2) throw new UserError(`--threshold ${key}: expected two values "watch,problem", got "${rhs}"`);
      t.watch = parseValue(parts[0]!, key, t);
      t.problem = parseValue(parts[1]!, key, t);
    }
    const bad = t.worse === "above" ? t.problem < t.watch : t.problem > t.watch;
    if (bad) {
      throw new UserError(`--threshold ${key}: the problem level (${t.problem}) must be ${t.worse === "above" ? "at or above" : "at or below"} the watch level (${t.watch})`);
    }
  }
  return out;
}
