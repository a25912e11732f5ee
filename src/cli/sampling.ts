/** Moved to analysis/sampling.ts (the library runs it); re-exported for existing imports. */
export * from "../analysis/sampling.js";
