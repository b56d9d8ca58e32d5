/** Quartz crystal monitor model: pure functions, no I/O. What is not exported here is private. */
export {
  QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S,
  QUARTZ_DENSITY_G_PER_CM3,
  QUARTZ_FREQUENCY_CONSTANT_HZ_CM,
  QUARTZ_SHEAR_MODULUS_G_PER_CM_S2,
  QUARTZ_SHEAR_VELOCITY_CM_PER_S,
} from './quartz.ts';
export {
  crystalLifeUsed,
  crystalThicknessFromPartNm,
  partThicknessFromCrystalNm,
  recalibrateTooling,
  sauerbreySensitivity,
  sauerbreySensitivityHzCm2PerUg,
  sauerbreyThicknessNm,
  stackFrequencyHz,
  stackThicknessNm,
  toolingFactor,
  zMatchFrequencyHz,
  zMatchThicknessNm,
} from './crystal.ts';
export type { CrystalFilm, CrystalLayer } from './crystal.ts';
