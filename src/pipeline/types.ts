/**
 * The pipeline's vocabulary: what flows in (readings, faults, commands, acknowledgements) and
 * the interfaces every source and output implements — a real instrument on a serial port or a
 * socket, a recorded journal, or the virtual chamber.
 *
 * Time: every input carries `timeS`, seconds on the run clock. The decision reducer is driven by
 * these times alone, never by the wall clock, so a live run, a replay and a simulation decide
 * identically.
 */
import type { Observable } from 'rxjs';

/** The physical quantity a channel of single numbers measures. */
export type ChannelKind = 'optical' | 'crystal';

/** Every channel an instrument can feed: the single-number ones and the spectral monitor. */
export type InstrumentChannel = ChannelKind | 'spectral';

/**
 * One reading. `optical`: the monitor signal as a fraction of full scale (transmittance or
 * reflectance, 0..1 nominal, noise may take it slightly outside). `crystal`: the crystal's
 * resonance frequency in Hz.
 */
export interface Reading {
  readonly kind: 'reading';
  readonly channel: ChannelKind;
  readonly value: number;
  /** Run time of the reading, s: the instrument's own timestamp when the line carries one. */
  readonly timeS: number;
  /** Host monotonic arrival time, s (equal to `timeS` for simulated and replayed readings). */
  readonly arrivalS: number;
}

/**
 * One spectrum from the spectral monitor: calibrated transmittance or reflectance (a fraction,
 * 0..1 nominal) at each wavelength of the channel's grid. The grid is fixed for the channel (from
 * the chamber file or the instrument's header frame) and shared by every reading of it: the same
 * array object, never to be written to. Dark and reference frames are the instrument's business.
 */
export interface SpectrumReading {
  readonly kind: 'spectrum';
  readonly channel: 'spectral';
  /** The channel's wavelengths, nm, strictly increasing; `values[i]` is at `wavelengthsNm[i]`. */
  readonly wavelengthsNm: Float64Array;
  readonly values: Float64Array;
  /** Run time of the spectrum, s: the instrument's own timestamp when the frame carries one. */
  readonly timeS: number;
  /** Host monotonic arrival time, s. */
  readonly arrivalS: number;
}

/** What an instrument's line can give: a single number or a spectrum. */
export type InstrumentReading = Reading | SpectrumReading;

/**
 * Stable codes of input faults (documented in the code registry with the alerts). The decoder
 * raises the first six; the controller the next two, for readings well formed but impossible: a
 * value no deposition can make from the recent readings (`implausible-jump`), a timestamp more
 * than a bounded step from the run clock's present (`time-jump`). The spectral decoder raises the
 * last six: a spectrum whose count of values is not its grid's (`spectrum-length`), with a value
 * that is no finite number (`spectrum-not-finite`) or lies far outside 0..1
 * (`spectrum-out-of-range`), a spectrum before any grid is known (`grid-unknown`), a header that
 * is no strictly increasing list of wavelengths (`grid-invalid`), and a header that differs from
 * the grid in use (`grid-changed`: the grid stays the first one).
 */
export type FaultCode =
  | 'not-a-number'
  | 'out-of-range'
  | 'time-backwards'
  | 'line-too-long'
  | 'garbled'
  | 'unknown-channel'
  | 'implausible-jump'
  | 'time-jump'
  | 'spectrum-length'
  | 'spectrum-not-finite'
  | 'spectrum-out-of-range'
  | 'grid-unknown'
  | 'grid-invalid'
  | 'grid-changed';

/** A line that could not be used. Bad input is a value, never an exception. */
export interface Fault {
  readonly kind: 'fault';
  readonly channel: InstrumentChannel | 'unknown';
  readonly code: FaultCode;
  /** The offending line (truncated to 200 characters). */
  readonly line: string;
  /** Character offset of the problem in the line, 0-based. */
  readonly offset: number;
  readonly arrivalS: number;
}

/** A request to a source's shutter. The layer number says which layer it opens or ends. */
export interface ShutterCommand {
  readonly kind: 'shutter';
  readonly action: 'open' | 'close';
  /** The source, named by its material. */
  readonly source: string;
  readonly layer: number;
  /** Run time at which the controller decided, s. */
  readonly timeS: number;
}

/**
 * The confirmation that a shutter command took effect: the instrument's acknowledgement that the
 * shutter moved, or, on a chamber that acknowledges nothing, the shutter output's word that the
 * command was written (`confirmedBy: 'sent'`, the most such a chamber can tell).
 */
export interface ShutterAck {
  readonly kind: 'shutter-ack';
  readonly action: 'open' | 'close';
  readonly source: string;
  readonly timeS: number;
  /** Absent: the instrument's acknowledgement. */
  readonly confirmedBy?: 'instrument' | 'sent';
}

/**
 * A shutter command that may not have taken effect, from the shutter output: not sent (the link
 * is down, or no command is configured for the source) or not acknowledged in time. A close is
 * re-sent until confirmed, so one close can report several attempts; an open is never re-sent.
 */
export interface ShutterFault {
  readonly kind: 'shutter-fault';
  readonly code: 'shutter-not-sent' | 'shutter-no-ack';
  readonly action: 'open' | 'close';
  readonly source: string;
  readonly layer: number;
  /** 1 for the command's first failure, then one more for each failed re-send. */
  readonly attempt: number;
  /** True when the output will not try this command again (an open; a close after its last attempt). */
  readonly final: boolean;
  readonly detail: string;
  readonly timeS: number;
}

/** An instrument link that went down or came back (from its status), so that a loss is alerted and journalled. */
export interface LinkChange {
  readonly kind: 'link';
  /** The instrument's id in the chamber file. */
  readonly link: string;
  readonly state: 'lost' | 'connected';
  readonly detail: string;
  readonly timeS: number;
}

export type OperatorAction = 'start' | 'hold' | 'resume' | 'cut-now' | 'skip-layer' | 'abort' | 'acknowledge';

/** What the operator asked for, from the dashboard or the command line. */
export interface OperatorCommand {
  readonly kind: 'operator';
  readonly action: OperatorAction;
  /** For `acknowledge`: the alert's id. */
  readonly alertId?: string;
  readonly timeS: number;
}

/**
 * The passage of time with no reading (from the wiring's scheduler), so that silence itself can
 * be noticed: a source that stops is detected by the next tick, not by the wall clock.
 */
export interface Tick {
  readonly kind: 'tick';
  readonly timeS: number;
}

/**
 * The run taken up again after its process stopped (`fringe run --resume`): the instruments went
 * on meanwhile, so each one's first reading after it may have moved further than any reading
 * could since the last one the run saw.
 */
export interface RunResumed {
  readonly kind: 'resumed';
  readonly timeS: number;
}

/** Anything the decision reducer consumes. */
export type PipelineInput = Reading | SpectrumReading | Fault | ShutterAck | ShutterFault | LinkChange | RunResumed | OperatorCommand | Tick;

/** A source's health. `lost` carries whether we closed it or it went away. */
export type SourceStatus =
  | { readonly state: 'connecting' | 'connected' | 'stale'; readonly detail?: string }
  | { readonly state: 'lost'; readonly closedByUs: boolean; readonly detail?: string };

/** Where readings come from: the same interface for a port, a socket, a journal and the simulator. */
export interface ReadingSource {
  readonly readings: Observable<InstrumentReading | Fault>;
  readonly status: Observable<SourceStatus>;
}

/**
 * Where shutter commands go. Every command ends, for the controller, in confirmations on `acks`
 * or failures on `faults`; `send` never blocks and never throws.
 */
export interface ShutterSink {
  send(command: ShutterCommand): void;
  readonly acks: Observable<ShutterAck>;
  readonly faults: Observable<ShutterFault>;
}
