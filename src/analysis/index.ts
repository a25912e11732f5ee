/**
 * The analysis stage: closed-form predictions and measurements on images,
 * and the ground truth on the image grid.
 */
export { predictFatShift, fatShiftInput, predictOffResonanceShift, measureFatShift, ppmToHz, multiPeakMeanPpm, type FatShiftInput, type FatShiftPrediction, type FatShiftMeasurement, type FineTruth, type AxisShift } from "./fatshift.js";
export { truthMaps, type TruthMaps, type TruthGrid } from "./truth.js";
