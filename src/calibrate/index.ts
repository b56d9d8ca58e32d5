/** Calibrating a chamber from finished runs (issue 11): the measured-spectrum reader, a run's data, the fit. What is not exported here is private. */
export {
  FRACTION_CEILING,
  formatMeasuredSpectrum,
  MAX_HEADER_LINES,
  MeasuredSpectrumError,
  parseMeasuredSpectrum,
  readMeasuredSpectrum,
} from './measured-spectrum.ts';
export type { MeasuredSpectrum, ParseSpectrumOptions, SpectrumQuantity, SpectrumScale } from './measured-spectrum.ts';
export { CalibrationDataError, collectRunData, differenceNoise, GROWTH_BINS, PAUSE_BINS } from './run-data.ts';
export type { CrystalLevel, LayerReadings, RunData } from './run-data.ts';
export { calibrate, CALIBRATION_PRIORS, CRYSTAL_LEVEL_FLOOR_HZ, OPTICAL_MODEL_FLOOR, PRIOR_DOMINATED, UNSEPARATED_CORRELATION } from './calibration-fit.ts';
export type { CalibrationOptions, CalibrationResult, DataResidual, LayerCalibration, MaterialCalibration, SpectrumData, ValueSigma } from './calibration-fit.ts';
export { chamberProfile, estimateSourceProcess, rebaseProfile } from './chamber-profile.ts';
export type { SourceProcess } from './chamber-profile.ts';
