export * from "./types.js";
export * from "./parse.js";
export * from "./geometry.js";
