/** Public face of the io stage. */
export { writeFileAtomic, OutputStage } from "./atomic.js";
export { encodeNpy, decodeNpy } from "./npy.js";
export type { NpyDtype, NpyReadDtype, NpyInput, NpyArray, ComplexData } from "./npy.js";
export { encodeNifti1, quaternionFromAffine } from "./nifti.js";
export type { Nifti1Options, QuaternionForm } from "./nifti.js";
export { encodeGrayPng, logMagnitude, percentile, crc32, insertTextChunks, SIMULATED_NOTE, DEFAULT_WINDOW_PERCENTILE, LOG_MAGNITUDE_FLOOR } from "./png.js";
export type { GrayPngOptions } from "./png.js";
