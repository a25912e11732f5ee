/**
 * The analysis stage: closed-form predictions and measurements on images,
 * and the ground truth on the image grid.
 */
export { predictFatShift, fatShiftInput, predictProtocolFatShift, predictOffResonanceShift, READ_SHIFT_FORMULA, READ_SHIFT_ALTERNATING, SLICE_SHIFT_FORMULA, SLICE_SHIFT_SPIN_ECHO, PHASE_SHIFT_FORMULA, measureFatShift, brentMinimum, hasWaterAndFat, ppmToHz, multiPeakMeanPpm, type FatShiftInput, type FatShiftPrediction, type FatShiftMeasurement, type FineTruth, type AxisShift } from "./fatshift.js";
export { truthMaps, type TruthMaps, type TruthGrid } from "./truth.js";
export { fatShiftReport } from "./report.js";
