/**
 * Display orientation of 2D pictures (PNG files, the HTML report).
 *
 * The arrays (.npy, NIfTI) keep their index order [.., phase, read]; only
 * pictures are turned. The convention (common practice in radiology, the
 * "radiological convention"):
 *   axial    — viewed from the feet: patient right on the image left, anterior up;
 *   coronal  — viewed from the front: patient right on the image left, superior up;
 *   sagittal — viewed from the patient's left: anterior on the image left, superior up.
 * The orientation is the physical axis closest to the slice normal. Each
 * display direction (columns left → right, rows top → bottom) is given to the
 * logical in-plane axis (read or phase) closest to it, with the sign that
 * points that way, so the picture is the same whichever way phase runs.
 *
 * Phantom coordinates are RAS+ (x toward the subject's right, y anterior,
 * z superior); the edge letters are those of the DICOM patient orientation
 * (R/L, A/P, S/I; DICOM PS3.3 C.7.6.1.1.1).
 */

export type Vec3 = [number, number, number];

/** Physical directions of a picture's axes and the index map from the array to it. */
export interface DisplayTransform {
  convention: string;
  orientation: "axial" | "coronal" | "sagittal";
  /** What increasing row (top → bottom) and column (left → right) index mean, e.g. "anterior→posterior". */
  rows: string;
  cols: string;
  /** True when display columns follow the phase axis (the array is transposed). */
  transpose: boolean;
  /** Display rows run against the logical axis they follow. */
  flipRows: boolean;
  /** Display columns run against the logical axis they follow. */
  flipCols: boolean;
  /** Logical axis shown along display columns (horizontal) and rows (vertical). */
  horizontal: "read" | "phase";
  vertical: "read" | "phase";
  /** DICOM orientation letters at each edge (more than one letter for oblique directions, largest component first). */
  letters: { left: string; right: string; top: string; bottom: string };
  /** Physical unit vectors (RAS+) of increasing display column and row. */
  colDir: Vec3;
  rowDir: Vec3;
}

const NAMES: Record<string, [string, string]> = {
  // [positive, negative] direction name of each RAS+ axis
  x: ["right", "left"],
  y: ["anterior", "posterior"],
  z: ["superior", "inferior"],
};
const LETTERS: [string, string][] = [["R", "L"], ["A", "P"], ["S", "I"]];

/** Display column and row directions (RAS+) of each orientation under the convention above. */
const TARGET: Record<DisplayTransform["orientation"], { col: Vec3; row: Vec3 }> = {
  axial: { col: [-1, 0, 0], row: [0, -1, 0] },
  coronal: { col: [-1, 0, 0], row: [0, 0, -1] },
  sagittal: { col: [0, -1, 0], row: [0, 0, -1] },
};

export const DISPLAY_CONVENTION =
  "radiological: axial viewed from the feet (patient right on image left, anterior up), coronal viewed from the front " +
  "(patient right on image left, superior up), sagittal viewed from the patient's left (anterior on image left, superior up)";

const dot = (a: Vec3, b: Vec3) => a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
const scale = (a: Vec3, s: number): Vec3 => [a[0] * s, a[1] * s, a[2] * s];

/** DICOM letters of a direction: components above 1e-3 of the largest, largest first (common practice for oblique labels). */
export function directionLetters(v: Vec3): string {
  const idx = [0, 1, 2].filter((i) => Math.abs(v[i]!) > 1e-3).sort((a, b) => Math.abs(v[b]!) - Math.abs(v[a]!));
  return idx.map((i) => LETTERS[i]![v[i]! > 0 ? 0 : 1]).join("");
}

function dirName(v: Vec3): string {
  let k = 0;
  for (let i = 1; i < 3; i++) if (Math.abs(v[i]!) > Math.abs(v[k]!)) k = i;
  const n = NAMES["xyz"[k]!]!;
  return v[k]! > 0 ? n[0] : n[1];
}

/** The display transform for logical axes given as physical unit vectors (RAS+). */
export function displayTransform(axes: { read: Vec3; phase: Vec3; slice: Vec3 }): DisplayTransform {
  const s = axes.slice;
  let k = 0;
  for (let i = 1; i < 3; i++) if (Math.abs(s[i]!) > Math.abs(s[k]!)) k = i;
  const orientation = (["sagittal", "coronal", "axial"] as const)[k]!;
  const t = TARGET[orientation];
  // the logical axis nearer to the column direction goes horizontal
  const transpose = Math.abs(dot(axes.phase, t.col)) > Math.abs(dot(axes.read, t.col));
  const horizontal = transpose ? "phase" : "read";
  const vertical = transpose ? "read" : "phase";
  const h = axes[horizontal], v = axes[vertical];
  const flipCols = dot(h, t.col) < 0;
  const flipRows = dot(v, t.row) < 0;
  const colDir = scale(h, flipCols ? -1 : 1), rowDir = scale(v, flipRows ? -1 : 1);
  return {
    convention: DISPLAY_CONVENTION,
    orientation,
    rows: `${dirName(scale(rowDir, -1))}→${dirName(rowDir)}`,
    cols: `${dirName(scale(colDir, -1))}→${dirName(colDir)}`,
    transpose, flipRows, flipCols, horizontal, vertical,
    letters: {
      left: directionLetters(scale(colDir, -1)), right: directionLetters(colDir),
      top: directionLetters(scale(rowDir, -1)), bottom: directionLetters(rowDir),
    },
    colDir, rowDir,
  };
}

/**
 * Turns a row-major plane [phase][read] (nPhase × nRead) into display order;
 * returns the values and the display width and height.
 */
export function toDisplay<T extends Float64Array | Int32Array>(
  t: Pick<DisplayTransform, "transpose" | "flipRows" | "flipCols">, plane: T, nRead: number, nPhase: number,
): { values: T; width: number; height: number } {
  if (plane.length !== nRead * nPhase) throw new RangeError(`plane of ${nPhase}×${nRead} needs ${nRead * nPhase} values, got ${plane.length}`);
  const width = t.transpose ? nPhase : nRead, height = t.transpose ? nRead : nPhase;
  const out = new (plane.constructor as new (n: number) => T)(plane.length);
  for (let r = 0; r < height; r++) {
    const a = t.flipRows ? height - 1 - r : r; // index along the vertical logical axis
    for (let c = 0; c < width; c++) {
      const b = t.flipCols ? width - 1 - c : c; // index along the horizontal logical axis
      const src = t.transpose ? b * nRead + a : a * nRead + b; // [phase][read]
      out[r * width + c] = plane[src]!;
    }
  }
  return { values: out, width, height };
}

/**
 * {@link toDisplay} of a plane the caller gives up: without a transpose the
 * rows and columns are reversed in place (no new array), else a copy is made.
 * The same values in the same order either way.
 */
export function toDisplayInPlace<T extends Float64Array | Int32Array>(
  t: Pick<DisplayTransform, "transpose" | "flipRows" | "flipCols">, plane: T, nRead: number, nPhase: number,
): { values: T; width: number; height: number } {
  if (t.transpose) return toDisplay(t, plane, nRead, nPhase);
  if (plane.length !== nRead * nPhase) throw new RangeError(`plane of ${nPhase}×${nRead} needs ${nRead * nPhase} values, got ${plane.length}`);
  if (t.flipRows && t.flipCols) plane.reverse(); // display index k holds plane[n − 1 − k]
  else if (t.flipRows) {
    for (let r = 0, q = nPhase - 1; r < q; r++, q--) {
      for (let c = 0; c < nRead; c++) {
        const x = plane[r * nRead + c]!;
        plane[r * nRead + c] = plane[q * nRead + c]!;
        plane[q * nRead + c] = x;
      }
    }
  } else if (t.flipCols) {
    for (let r = 0; r < nPhase; r++) plane.subarray(r * nRead, (r + 1) * nRead).reverse();
  }
  return { values: plane, width: nRead, height: nPhase };
}

/**
 * Display pixel coordinate (continuous, pixel i covers [i, i+1)) of a logical
 * position: u along read and v along phase in metres, with index n of N at
 * (n − ⌊N/2⌋)·Δ (the run folder's axes convention).
 */
export function displayPoint(
  t: Pick<DisplayTransform, "transpose" | "flipRows" | "flipCols">,
  grid: { nRead: number; nPhase: number; dRead: number; dPhase: number },
  u: number, v: number,
): { x: number; y: number } {
  const ir = u / grid.dRead + Math.floor(grid.nRead / 2) + 0.5;
  const ip = v / grid.dPhase + Math.floor(grid.nPhase / 2) + 0.5;
  const [h, hn, vv, vn] = t.transpose ? [ip, grid.nPhase, ir, grid.nRead] : [ir, grid.nRead, ip, grid.nPhase];
  return { x: t.flipCols ? hn - h : h, y: t.flipRows ? vn - vv : vv };
}
