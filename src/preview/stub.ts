/** Page bundle only: stands in for pngjs, whose encoder the page never calls (it draws with a canvas). */
function unavailable(): never {
  throw new Error("not available in the previewer page");
}
export class PNG {
  constructor() {
    unavailable();
  }
  static sync = { write: unavailable, read: unavailable };
}
export default { PNG };
