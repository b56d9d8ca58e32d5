/** Live estimation of the layer in progress from the optical monitor: pure, no I/O. What is not exported here is private. */
export { createLayerFit } from './layer-fit.ts';
export type { LayerEstimate, LayerFit, LayerFitOptions } from './layer-fit.ts';
export { buildSignalTable, signalAndSlope, SIGNAL_TABLE_STEP_NM } from './signal-table.ts';
export type { SignalTable } from './signal-table.ts';
