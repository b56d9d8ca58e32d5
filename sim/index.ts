/** The virtual chamber: a seeded, physically modelled box coater speaking fringe's reading vocabulary. */
export {
  createRandomStream,
  OrnsteinUhlenbeck,
  xoshiro128StarStarFromState,
} from './random.ts';
export type { RandomStream } from './random.ts';
export {
  CrystalSettingsSchema,
  loadSimProfile,
  MaterialOverrideSchema,
  MaterialSettingsSchema,
  materialSettingsFor,
  OpticalSettingsSchema,
  SimProfileSchema,
  SourceOverrideSchema,
  SourceSettingsSchema,
  sourceSettingsFor,
  SpectrophotometerSettingsSchema,
} from './profile.ts';
export type {
  CrystalSettings,
  MaterialOverride,
  MaterialSettings,
  OpticalSettings,
  SimProfile,
  SourceOverride,
  SourceSettings,
  SpectrophotometerSettings,
} from './profile.ts';
export { scaledDispersion } from '../src/model/optics/dispersion.ts';
export { fluctuationGridS, SourceRate } from './source-rate.ts';
export type { SourceRateSettings } from './source-rate.ts';
export { createVirtualChamber, INHOMOGENEITY_SLICES, trueOpticalErrorPercent, trueStackSpec } from './virtual-chamber.ts';
export type {
  ChamberTruth,
  ShutterMove,
  TrueLayer,
  TrueMaterial,
  TrueSlice,
  TrueSource,
  VirtualChamber,
} from './virtual-chamber.ts';
export {
  formatAck,
  formatReading,
  formatShutterCommand,
  MAX_LINE_CHARS,
  parseAck,
  parseReadingLine,
  parseShutterCommand,
} from './line-format.ts';
export { createPtyPair, serveOnPty, serveOnStream, serveOnTcp } from './serve.ts';
export type { PtyPair, ServedChamber, ServeOptions, TcpServedChamber, TcpServeOptions } from './serve.ts';
export { measureParts, MEASUREMENT_STEP_NM } from './spectrophotometer.ts';
export type { PartMeasurement } from './spectrophotometer.ts';
export { createChamberSource } from './chamber-source.ts';
export type { ChamberSourceOptions } from './chamber-source.ts';
