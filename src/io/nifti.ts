/**
 * NIfTI-1 single-file (.nii) writer, float32 volumes.
 *
 * Layout and fields follow the NIfTI-1 data format standard (header file
 * nifti1.h, NIfTI Data Format Working Group, 2004): a 348-byte little-endian
 * header, 4 extension bytes (all zero: no extensions), data from byte 352,
 * x fastest. Both orientations are written: the sform (sform_code 1, scanner)
 * holds the affine as given; the qform (qform_code 1) holds the same mapping
 * as a rotation quaternion, qfac, voxel sizes and offset.
 */

/** Options of {@link encodeNifti1}. */
export interface Nifti1Options {
  /** Voxel values, x fastest then y then z; length nx·ny·nz. */
  data: Float32Array;
  /** Voxel counts [nx, ny, nz]. */
  dims: [number, number, number];
  /** Voxel size [dx, dy, dz] in mm (positive); equal to the column lengths of the affine. */
  voxelMm: [number, number, number];
  /**
   * 3×4 matrix, rows [x, y, z], in mm: RAS+ scanner position of voxel index
   * (i, j, k) is affine · [i, j, k, 1]ᵀ.
   */
  affine: number[][];
  /** Free text, ASCII, at most 79 characters (longer is cut). */
  description?: string;
}

/** Size of the NIfTI-1 header in bytes. */
const HEADER_SIZE = 348;
/** First data byte: header plus the 4-byte extension flag. */
const VOX_OFFSET = 352;
const DT_FLOAT32 = 16;
const NIFTI_UNITS_MM = 2;
const NIFTI_UNITS_SEC = 8;
const NIFTI_XFORM_SCANNER_ANAT = 1;

/** qform parameters: quaternion (b, c, d) with a ≥ 0 implied, qfac = ±1. */
export interface QuaternionForm {
  b: number;
  c: number;
  d: number;
  qfac: 1 | -1;
}

/**
 * Nearest orthogonal matrix (polar factor) of a 3×3 matrix by the Newton
 * iteration X ← (X + X⁻ᵀ)/2 (N. J. Higham, "Computing the polar
 * decomposition—with applications", SIAM J. Sci. Stat. Comput. 7 (1986)
 * 1160–1174). Returns the input unchanged if it is already orthogonal.
 */
function polar(m: number[][]): number[][] {
  let x = m.map((r) => r.slice());
  for (let iter = 0; iter < 50; iter++) {
    const det =
      x[0][0] * (x[1][1] * x[2][2] - x[1][2] * x[2][1]) -
      x[0][1] * (x[1][0] * x[2][2] - x[1][2] * x[2][0]) +
      x[0][2] * (x[1][0] * x[2][1] - x[1][1] * x[2][0]);
    if (det === 0) throw new RangeError("NIfTI affine is singular");
    // inverse transpose = cofactor matrix / det
    const cof = [
      [
        x[1][1] * x[2][2] - x[1][2] * x[2][1],
        -(x[1][0] * x[2][2] - x[1][2] * x[2][0]),
        x[1][0] * x[2][1] - x[1][1] * x[2][0],
      ],
      [
        -(x[0][1] * x[2][2] - x[0][2] * x[2][1]),
        x[0][0] * x[2][2] - x[0][2] * x[2][0],
        -(x[0][0] * x[2][1] - x[0][1] * x[2][0]),
      ],
      [
        x[0][1] * x[1][2] - x[0][2] * x[1][1],
        -(x[0][0] * x[1][2] - x[0][2] * x[1][0]),
        x[0][0] * x[1][1] - x[0][1] * x[1][0],
      ],
    ];
    let change = 0;
    const next = [0, 1, 2].map((i) =>
      [0, 1, 2].map((j) => {
        const v = 0.5 * (x[i][j] + cof[i][j] / det);
        change = Math.max(change, Math.abs(v - x[i][j]));
        return v;
      }),
    );
    x = next;
    if (change < 1e-15) break;
  }
  return x;
}

/**
 * Quaternion form of the rotation part of an affine (the standard NIfTI-1
 * qform method described in nifti1.h): normalise the columns of the 3×3 part,
 * orthogonalise, and if the determinant is negative set qfac = −1 and negate
 * the third column, leaving a proper rotation R; then (a, b, c, d) is the unit
 * quaternion of R with a ≥ 0 (K. Shoemake, "Animating rotation with
 * quaternion curves", SIGGRAPH 1985).
 */
export function quaternionFromAffine(affine: number[][]): QuaternionForm {
  const r = [0, 1, 2].map((i) => [0, 1, 2].map((j) => affine[i][j]));
  for (let j = 0; j < 3; j++) {
    const len = Math.hypot(r[0][j], r[1][j], r[2][j]);
    if (!(len > 0)) throw new RangeError(`NIfTI affine column ${j} has zero length`);
    for (let i = 0; i < 3; i++) r[i][j] /= len;
  }
  const q = polar(r);
  const det =
    q[0][0] * (q[1][1] * q[2][2] - q[1][2] * q[2][1]) -
    q[0][1] * (q[1][0] * q[2][2] - q[1][2] * q[2][0]) +
    q[0][2] * (q[1][0] * q[2][1] - q[1][1] * q[2][0]);
  let qfac: 1 | -1 = 1;
  if (det < 0) {
    qfac = -1;
    for (let i = 0; i < 3; i++) q[i][2] = -q[i][2];
  }
  const [r11, r12, r13] = q[0];
  const [r21, r22, r23] = q[1];
  const [r31, r32, r33] = q[2];
  let a = r11 + r22 + r33 + 1;
  let b: number;
  let c: number;
  let d: number;
  if (a > 0.5) {
    a = 0.5 * Math.sqrt(a);
    b = (0.25 * (r32 - r23)) / a;
    c = (0.25 * (r13 - r31)) / a;
    d = (0.25 * (r21 - r12)) / a;
  } else {
    const xd = 1 + r11 - (r22 + r33);
    const yd = 1 + r22 - (r11 + r33);
    const zd = 1 + r33 - (r11 + r22);
    if (xd > 1) {
      b = 0.5 * Math.sqrt(xd);
      c = (0.25 * (r12 + r21)) / b;
      d = (0.25 * (r13 + r31)) / b;
      a = (0.25 * (r32 - r23)) / b;
    } else if (yd > 1) {
      c = 0.5 * Math.sqrt(yd);
      b = (0.25 * (r12 + r21)) / c;
      d = (0.25 * (r23 + r32)) / c;
      a = (0.25 * (r13 - r31)) / c;
    } else {
      d = 0.5 * Math.sqrt(zd);
      b = (0.25 * (r13 + r31)) / d;
      c = (0.25 * (r23 + r32)) / d;
      a = (0.25 * (r21 - r12)) / d;
    }
    if (a < 0) {
      b = -b;
      c = -c;
      d = -d;
    }
  }
  return { b, c, d, qfac };
}

function checkInputs(opts: Nifti1Options): void {
  const { dims, voxelMm, affine, data } = opts;
  for (const n of dims) {
    if (!Number.isSafeInteger(n) || n < 1 || n > 32767) {
      throw new RangeError(`NIfTI-1 dimensions must be integers in 1..32767, got [${dims.join(", ")}]`);
    }
  }
  if (data.length !== dims[0] * dims[1] * dims[2]) {
    throw new RangeError(`NIfTI data has ${data.length} values, dims [${dims.join(", ")}] need ${dims[0] * dims[1] * dims[2]}`);
  }
  if (affine.length !== 3 || affine.some((row) => row.length !== 4 || row.some((v) => !Number.isFinite(v)))) {
    throw new RangeError("NIfTI affine must be 3 rows of 4 finite numbers (mm)");
  }
  for (let j = 0; j < 3; j++) {
    const v = voxelMm[j];
    if (!(v > 0) || !Number.isFinite(v)) throw new RangeError(`voxel size ${j} must be positive mm, got ${v}`);
    const len = Math.hypot(affine[0][j], affine[1][j], affine[2][j]);
    if (Math.abs(len - v) > 1e-5 * v) {
      throw new RangeError(`affine column ${j} has length ${len} mm but voxelMm[${j}] is ${v} mm`);
    }
  }
}

/**
 * Encodes a float32 volume as a single-file NIfTI-1 image (.nii):
 * sizeof_hdr 348, datatype FLOAT32 (16), bitpix 32, dim = [3, nx, ny, nz, 1, 1, 1, 1],
 * pixdim = [qfac, dx, dy, dz, 0, 0, 0, 0] (mm), xyzt_units mm|s, vox_offset 352,
 * scl_slope 1, sform_code 1 with srow = affine, qform_code 1 from
 * {@link quaternionFromAffine}, magic "n+1\0". Voxel (i, j, k) is
 * data[i + nx·(j + ny·k)].
 * @throws RangeError on inconsistent sizes or an affine whose column lengths differ from voxelMm.
 */
export function encodeNifti1(opts: Nifti1Options): Uint8Array {
  checkInputs(opts);
  const { data, dims, voxelMm, affine } = opts;
  const bytes = new Uint8Array(VOX_OFFSET + 4 * data.length);
  const v = new DataView(bytes.buffer);
  const le = true;
  v.setInt32(0, HEADER_SIZE, le);
  // dim[0..7] at 40
  const dim = [3, dims[0], dims[1], dims[2], 1, 1, 1, 1];
  for (let i = 0; i < 8; i++) v.setInt16(40 + 2 * i, dim[i], le);
  v.setInt16(70, DT_FLOAT32, le); // datatype
  v.setInt16(72, 32, le); // bitpix
  const qf = quaternionFromAffine(affine);
  const pixdim = [qf.qfac, voxelMm[0], voxelMm[1], voxelMm[2], 0, 0, 0, 0];
  for (let i = 0; i < 8; i++) v.setFloat32(76 + 4 * i, pixdim[i], le);
  v.setFloat32(108, VOX_OFFSET, le); // vox_offset
  v.setFloat32(112, 1, le); // scl_slope
  v.setFloat32(116, 0, le); // scl_inter
  bytes[123] = NIFTI_UNITS_MM | NIFTI_UNITS_SEC; // xyzt_units
  v.setFloat32(124, 0, le); // cal_max
  v.setFloat32(128, 0, le); // cal_min
  const text = (opts.description ?? "").slice(0, 79);
  for (let i = 0; i < text.length; i++) {
    const code = text.charCodeAt(i);
    bytes[148 + i] = code >= 0x20 && code < 0x7f ? code : 0x3f; // '?' for non-ASCII
  }
  v.setInt16(252, NIFTI_XFORM_SCANNER_ANAT, le); // qform_code
  v.setInt16(254, NIFTI_XFORM_SCANNER_ANAT, le); // sform_code
  v.setFloat32(256, qf.b, le);
  v.setFloat32(260, qf.c, le);
  v.setFloat32(264, qf.d, le);
  v.setFloat32(268, affine[0][3], le); // qoffset_x
  v.setFloat32(272, affine[1][3], le);
  v.setFloat32(276, affine[2][3], le);
  for (let row = 0; row < 3; row++) {
    for (let col = 0; col < 4; col++) v.setFloat32(280 + 16 * row + 4 * col, affine[row][col], le);
  }
  bytes.set([0x6e, 0x2b, 0x31, 0x00], 344); // "n+1\0"
  // bytes 348..351: extension flag, all zero.
  for (let i = 0, p = VOX_OFFSET; i < data.length; i++, p += 4) v.setFloat32(p, data[i], le);
  return bytes;
}
