/**
 * dataset/: synthetic raw data for reconstruction code — receive coils
 * (Biot–Savart), coil noise, sampling masks, seeded phantom perturbations,
 * the per-case files and the batch manifest.
 */
export * from "./prng.js";
export * from "./coils.js";
export * from "./noise.js";
export * from "./masks.js";
export * from "./simulate.js";
export * from "./case.js";
export * from "./batch.js";
export * from "./raw.js";
