/** The single-file build of mathjs (CommonJS/UMD); typed where it is used (units.ts). */
declare module "mathjs/lib/browser/math.js" {
  const mathjs: unknown;
  export default mathjs;
}
