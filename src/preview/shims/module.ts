/** Preview bundle only: createRequire for the one CommonJS file the core loads this way (mathjs's single-file build). */
import * as mathjs from "mathjs/lib/browser/math.js";
export function createRequire(): (id: string) => unknown {
  return (id: string) => {
    if (id.includes("mathjs")) return (mathjs as { default?: unknown }).default ?? mathjs;
    throw new Error(`require(${id}) is not available in the previewer page`);
  };
}
export default { createRequire };
