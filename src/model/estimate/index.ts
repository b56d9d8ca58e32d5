/** Live estimation of the layer in progress from the optical monitor: pure, no I/O. What is not exported here is private. */
export { createLayerFit } from './layer-fit.ts';
export type { FinalEstimate, LayerEstimate, LayerFit, LayerFitOptions } from './layer-fit.ts';
export { buildIndexTables, buildSignalTable, layerSignalTable, signalAndSlope, SIGNAL_TABLE_STEP_NM } from './signal-table.ts';
export type { IndexTables, SignalSource, SignalTable } from './signal-table.ts';
export { refitChip } from './chip-refit.ts';
export { readingNoise, READING_NOISE_MIN } from './reading-noise.ts';
export type { ChipRefitOptions, ChipRefitResult, MaterialFactor, RefitLayer, RefitLayerResult } from './chip-refit.ts';
export { buildBroadbandChip } from './broadband-chip.ts';
export type { BroadbandChip, BroadbandChipSpec } from './broadband-chip.ts';
export { addSpectrumInformation, carryForward, createBroadbandFit, DEFAULT_WANDER, departureThreshold, STATE } from './broadband-fit.ts';
export type { BroadbandEstimate, BroadbandFit, BroadbandFitOptions, SpectrumMerit, Wander } from './broadband-fit.ts';
