/**
 * phantom/: the public face of the phantom stage. Load and validate phantom
 * files, the built-in tissue library, compiled shapes and partial-volume cell
 * contents for the isochromat sampler. All numbers are SI (m, s, Hz, rad).
 */
export type { Bounds, FatModel, Phantom, Tissue } from "./types.js";
export { parsePhantom, parseJsonText } from "./load.js";
export {
  libraryTissue,
  libraryNames,
  libraryAbout,
  librarySources,
  isLibraryTissue,
  LIBRARY_FIELDS,
  LIBRARY_FIELD_TOLERANCE,
  type LibraryLookup,
  type TissueSources,
} from "./tissues.js";
export { Shape, makeShape, type ShapeSpec, type ShapeType, type Axis } from "./shapes.js";
export { cellContents, cellUniform, shapeCellContents, shapeCellUniform, setCellTiles, phantomBounds, DEFAULT_SUB, type CellContents } from "./cells.js";
export { parseB0, compileB0Expression, B0_SYMBOLS, B0_FUNCTIONS, B0_KINDS, type B0Model, type B0Context, type RealArray } from "./b0.js";
export { chiFieldRatio, parseSusceptibility, type ChiObject } from "./susceptibility.js";
export { fieldMapSampler, parseFieldMap } from "./fieldmap.js";
export type { PhantomLoadOptions } from "./load.js";
