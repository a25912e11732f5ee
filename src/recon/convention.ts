/** The FFT convention of fft.ts, stated for reports and dataset files. */
export const FFT_CONVENTION_TEXT =
  "Signal model s(k) = Σ m(r)·exp(−i2πk·r). Along each axis of N points with c = floor(N/2): k-space index m ↔ k = (m−c)·Δk, " +
  "image index n ↔ x = (n−c)·Δx, Δk·Δx = 1/N. Reconstruction image[n] = (1/N)·Σ_m s[m]·exp(+i2π(m−c)(n−c)/N) per axis, " +
  "i.e. numpy: image = fftshift(ifftn(ifftshift(kspace, axes), axes=axes), axes) over the phase and read (and slice-encoding step) axes, " +
  "then the central matrix kept (oversampling removed). A voxel full of tissue with PD 1 and fully relaxed magnetization tipped by 90° reconstructs to about 1.";
