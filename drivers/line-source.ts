/**
 * A reading source over a line link: transport, framer and decoder, as the driver contract says.
 *
 * The contract (the same for every `ReadingSource`):
 * - `readings` carries readings and faults in arrival order; a bad line is a fault, never an
 *   error; `readings` completes when the source is closed and never errors (a lost device is a
 *   `status` event, and the link keeps retrying);
 * - `status` goes connecting → connected → (stale when quiet for `staleAfterS`) → lost
 *   `{ closedByUs: false }` when the connection fails → connecting again after the back-off…,
 *   and ends with lost `{ closedByUs: true }` after `close()`;
 * - both streams are hot: the source connects when it is created; subscribe at once.
 */
import { filter, map, type Observable } from 'rxjs';
import { ConfigError } from '../src/config/validation.ts';
import type { Fault, InstrumentChannel, InstrumentReading, ReadingSource } from '../src/pipeline/types.ts';
import { createLineDecoder, FRINGE_DIALECT, type LineDecoderOptions } from './line-decoder.ts';
import { FAULT_LINE_CHARS } from './line-framer.ts';
import { createLineLink, type LineLink, type LineLinkOptions } from './line-link.ts';
import { createSpectrumDecoder, spectrumLineBytes, type SpectrumFormOptions } from './spectrum-decoder.ts';

export type LineSourceOptions = LineLinkOptions & {
  /** How the instrument's lines read. Default {@link FRINGE_DIALECT}. */
  dialect?: LineDecoderOptions;
  /**
   * The channels this source feeds; a reading of another channel becomes an `unknown-channel`
   * fault. Default: optical and crystal (and spectral with a `spectrum` form).
   */
  channels?: readonly InstrumentChannel[];
  /**
   * How the spectral monitor's frames read, for a port that carries spectra. A line of this form
   * goes to the spectrum decoder, any other to `dialect`. The framer's line limit is raised to
   * what the form's grid needs (`spectrumLineBytes`) when that is more.
   */
  spectrum?: SpectrumFormOptions;
};

/** A reading source that is also a line link (so a shutter output can share its port). */
export type LineSource = ReadingSource & LineLink;

/** Creates the source and starts connecting; bad options throw a `ConfigError` naming them. */
export function createLineSource(options: LineSourceOptions): LineSource {
  const { dialect = FRINGE_DIALECT, channels, spectrum, ...linkOptions } = options;
  // Decoders first: a bad dialect must throw before anything connects.
  const decode = createLineDecoder(dialect);
  const spectral = spectrum === undefined ? undefined : createSpectrumDecoder(spectrum);
  if (channels !== undefined && (!Array.isArray(channels) || channels.some((c) => c !== 'optical' && c !== 'crystal' && c !== 'spectral'))) {
    throw new ConfigError('createLineSource options', [{ at: 'channels', message: 'expected a list of optical, crystal and spectral' }]);
  }
  const accepted = new Set<InstrumentChannel>(channels ?? (spectral ? ['optical', 'crystal', 'spectral'] : ['optical', 'crystal']));
  if (spectrum !== undefined) {
    const needed = spectrumLineBytes(spectrum);
    const framer = linkOptions.framer ?? {};
    if ((framer.maxLineBytes ?? 1024) < needed) linkOptions.framer = { ...framer, maxLineBytes: needed };
  }
  const link = createLineLink(linkOptions);
  const readings: Observable<InstrumentReading | Fault> = link.lines.pipe(
    map((item) => {
      if (item.kind !== 'line') return item;
      // undefined: not a spectral frame (another channel's line on a shared port).
      const frame = spectral?.decode(item.text, item.arrivalS);
      const out: InstrumentReading | Fault | null = frame === undefined ? decode(item.text, item.arrivalS) : frame;
      if (out === null || out.kind === 'fault' || accepted.has(out.channel)) return out;
      const line = item.text.length > FAULT_LINE_CHARS ? item.text.slice(0, FAULT_LINE_CHARS) : item.text;
      return { kind: 'fault', channel: 'unknown', code: 'unknown-channel', line, offset: 0, arrivalS: item.arrivalS } satisfies Fault;
    }),
    filter((item): item is InstrumentReading | Fault => item !== null),
  );
  return {
    readings,
    status: link.status,
    lines: link.lines,
    get description() {
      return link.description;
    },
    write: (text) => link.write(text),
    close: () => link.close(),
  };
}
