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
