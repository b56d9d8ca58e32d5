/**
 * Instrument drivers: a transport (bytes), a pure framer (bytes to lines), a pure decoder (lines
 * to readings or faults), the link that keeps a transport connected, the reading source and the
 * shutter output built on it, and the chamber file that binds them to channels and sources.
 */
export {
  ChamberSchema,
  ChamberShuttersSchema,
  InstrumentSchema,
  TransportConfigSchema,
  loadChamber,
  openChamber,
  transportFactory,
  type Chamber,
  type ChamberDeps,
  type ChamberDrivers,
  type TransportConfig,
} from './chamber.ts';
export {
  ChannelKindSchema,
  ChannelScalingSchema,
  DelimitedDialectSchema,
  FRINGE_DIALECT,
  JsonDialectSchema,
  LineDecoderOptionsSchema,
  RegexDialectSchema,
  createLineDecoder,
  type LineDecoder,
  type LineDecoderOptions,
  type ResolvedLineDecoderOptions,
} from './line-decoder.ts';
export {
  FAULT_LINE_CHARS,
  LineFramerOptionsSchema,
  createLineFramer,
  type LineFramer,
  type LineFramerOptions,
  type ResolvedLineFramerOptions,
} from './line-framer.ts';
export {
  LineLinkSettingsSchema,
  RetryOptionsSchema,
  createLineLink,
  retryDelayMs,
  type LineLink,
  type LineLinkOptions,
  type LineLinkSettings,
  type LinkLine,
  type ResolvedRetryOptions,
  type RetryOptions,
} from './line-link.ts';
export { createJournalSource, type JournalSourceOptions } from './journal-source.ts';
export { createLineSource, type LineSource, type LineSourceOptions } from './line-source.ts';
export {
  AckOptionsSchema,
  FRINGE_ACK_PATTERN,
  FRINGE_COMMANDS,
  ShutterSettingsSchema,
  SourceCommandsSchema,
  createShutterOutput,
  type ShutterOutput,
  type ShutterOutputOptions,
  type ShutterSettings,
} from './shutter-output.ts';
export {
  SerialSettingsSchema,
  TcpSettingsSchema,
  createSerialTransport,
  createTcpTransport,
  type SerialBinding,
  type SerialSettings,
  type SerialTransportOptions,
  type TcpTransportOptions,
  type Transport,
  type TransportEvents,
  type TransportFactory,
} from './transport.ts';
