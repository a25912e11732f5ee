/** Public face of the recon stage. */
export {
  FFTPlan,
  getPlan,
  centreIndex,
  centredLine,
  fftc1,
  ifftc1,
  fft2c,
  ifft2c,
  fft3c,
  ifft3c,
} from "./fft.js";
export type { FFTSign } from "./fft.js";
export { toGrid, reconstructGrid, reconstructCartesian, magnitude, type ComplexVolume } from "./reconstruct.js";
export { homodynePlane, homodyneWeights } from "./partial-fourier.js";
