/** The dashboard server: the run hub, the Fastify server and its plugins, runs on disk. */
export { bearerToken, generateToken, isLoopback, mayView, redactUrl, tokensMatch, VIEWER_HEADER } from './auth.ts';
export { buildServer, PUBLIC_DIR } from './build-server.ts';
export type { ServerContext, ServerDeps, ServerOptions } from './build-server.ts';
export { BoundedHistory } from './bounded-history.ts';
export { createHostRule, decodeComponent, isHostName, splitTarget } from './host-rule.ts';
export type { Connection, HostRule, RequestTarget } from './host-rule.ts';
export { Decimator } from './decimator.ts';
export type { DecimatedPoint } from './decimator.ts';
export { startJournalReplay } from './journal-run.ts';
export type { JournalReplay } from './journal-run.ts';
export { outcomeSpectrum } from './outcome.ts';
export { COMMAND_ACTIONS } from './plugins/commands.ts';
export { DEFAULT_LIVE_OPTIONS } from './plugins/live.ts';
export type { LiveOptions, LiveStats } from './plugins/live.ts';
export { createRunHub } from './run-hub.ts';
export type { CommandOutcome, HubListener, RunControl, RunFeed, RunHub, RunHubOptions } from './run-hub.ts';
export { listRuns, readJournalHeader, readSummary, RUN_ID_PATTERN, runFolder } from './run-store.ts';
export type { RunFolder, RunListing } from './run-store.ts';
export { buildRunSummary } from './run-summary.ts';
export type { RunSummary, RunSummaryLayer } from './run-summary.ts';
export { newRunId, startSimulatedRun } from './simulated-run.ts';
export type { SimulatedRun, SimulatedRunOptions } from './simulated-run.ts';
export { VIEW_FORMAT_VERSION } from './views.ts';
export type {
  AlertView,
  CrystalView,
  HubMessage,
  LayerStatus,
  LogEntry,
  OutcomeView,
  RunSnapshot,
  RunSourceKind,
  RunStatus,
  StackRow,
  TraceView,
} from './views.ts';
