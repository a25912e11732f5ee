/**
 * Physical constants shared by every stage (SI units).
 */

/**
 * Proton gyromagnetic ratio γ (rad s⁻¹ T⁻¹), free proton, CODATA 2018
 * (Tiesinga et al., Rev. Mod. Phys. 93, 025010, 2021). isofold uses the free
 * proton value throughout; the shielded value in water differs by 25.7 ppm.
 */
export const GAMMA = 2.6752218744e8;

/** γ̄ = γ/2π in Hz/T (CODATA 2018, free proton): 42.577 478 518 MHz/T. */
export const GAMMA_BAR = GAMMA / (2 * Math.PI);

/** Vacuum permeability μ0 (T·m/A), CODATA 2018. */
export const MU0 = 1.25663706212e-6;

/**
 * Six-peak fat spectrum: chemical shift relative to water (ppm) and relative
 * amplitude. Hamilton et al. 2011, "In vivo characterization of the liver fat
 * ¹H MR spectrum", NMR Biomed 24:784, as used with multi-peak fat modelling by
 * Yu et al. 2008, MRM 60:1122. Positions and amplitudes are from memory
 * (consistent with the ratios in the Hamilton abstract: CH₂ 2.1/1.3 ppm slope
 * 0.172, CH₃/CH₂ 0.125, 8.6 % of the fat signal under the water peak).
 */
export const FAT_PEAKS_PPM = [-3.8, -3.4, -2.6, -1.94, -0.39, 0.6] as const;
export const FAT_PEAKS_AMPLITUDE = [0.087, 0.693, 0.128, 0.004, 0.039, 0.048] as const;

/**
 * Exponent β of SNR ∝ B0^β between field strengths: 1, the sample-noise-dominated
 * regime of D. I. Hoult and R. E. Richards, J. Magn. Reson. 24 (1976) 71, the usual
 * assumption at clinical field strengths (common practice). Used by the dataset's
 * physical noise model and by the relative SNR against a reference at another field.
 */
export const SNR_FIELD_EXPONENT = 1;

/** Single-peak fat model: the main methylene peak at −3.4 ppm (Hamilton et al. 2011). */
export const FAT_SINGLE_PPM = -3.4;
