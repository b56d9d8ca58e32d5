/**
 * fringe's own ASCII line format, spoken by the virtual chamber over a serial line or a TCP
 * socket (and usable by any instrument bridge). One message per line, fields separated as
 * shown, every line ended by a single LF (a CR before the LF is tolerated on input). Lines
 * longer than {@link MAX_LINE_CHARS} characters (without the line end) are refused.
 *
 * From the chamber to the host:
 *
 * ```text
 * OPT,<time_s>,<value>          optical reading: run time, s, 3 decimals; signal as a fraction
 *                               of full scale, 6 decimals (may be slightly < 0 or > 1 with noise)
 * XTL,<time_s>,<frequency_hz>   crystal reading: run time, s, 3 decimals; resonance frequency,
 *                               Hz, 3 decimals
 * ACK <source> OPEN|CLOSE <time_s>
 *                               a shutter moved: the source (its material name), the move, and
 *                               the run time of the move, s, 3 decimals
 * ```
 *
 * With a spectral monitor in the simulator profile, its spectra too, in the profile's form: a
 * header of the grid when a host connects and again every 50 spectra, a line per spectrum, the time with 3 decimals and
 * each value (a fraction) with 6; these lines are longer than MAX_LINE_CHARS (about 2.3 kB for
 * 251 wavelengths; the spectral form's own bound applies):
 *
 * ```text
 * SPW,<nm>,<nm>,…                          table form: the wavelengths, nm
 * SPC,<time_s>,<value>,<value>,…           table form: one spectrum
 * {"ch":"spectral","nm":[<nm>,…]}          json form: the wavelengths
 * {"ch":"spectral","t":<time_s>,"v":[…]}   json form: one spectrum
 * ```
 *
 * From the host to the chamber:
 *
 * ```text
 * SHUTTER <source> OPEN|CLOSE <layer>
 *                               move a source's shutter; `layer` (an integer ≥ 1) is the layer
 *                               the move opens or ends
 * ```
 *
 * Numbers are plain decimals (`-`, digits, `.`, digits; no exponent, no `+`), written with the
 * fixed number of decimals above and never as `-0.000`. Keywords are upper case; a source name
 * is any run of printable ASCII characters other than space. Times are ≥ 0; crystal
 * frequencies > 0. Example:
 *
 * ```text
 * OPT,12.300,0.912345
 * XTL,12.300,5987654.321
 * SHUTTER TiO2 CLOSE 3
 * ACK TiO2 CLOSE 12.517
 * ```
 *
 * Every parser returns a value, never throws: the message, or a {@link Fault} saying what is
 * wrong and at which character.
 */
import type { ChannelKind, Fault, FaultCode, Reading, ShutterAck, ShutterCommand, SpectrumReading } from '../src/pipeline/types.ts';

/** Longest line accepted, characters without the line end. */
export const MAX_LINE_CHARS = 200;

const TIME_DECIMALS = 3;
const OPTICAL_DECIMALS = 6;
const CRYSTAL_DECIMALS = 3;
const NUMBER = /^-?\d+(\.\d+)?$/;
const SOURCE = /^[!-~]+$/; // printable ASCII without space

/** `value` with `decimals` decimals, no `-` on a zero. Throws on a non-finite value (a bug, not input). */
function fixed(value: number, decimals: number): string {
  if (!Number.isFinite(value)) throw new RangeError(`cannot write ${value} in the line format`);
  const text = value.toFixed(decimals);
  return text.startsWith('-') && /^-0\.?0*$/.test(text) ? text.slice(1) : text;
}

/** `OPT,<time_s>,<value>\n` or `XTL,<time_s>,<frequency_hz>\n`. */
export function formatReading(reading: Reading): string {
  const tag = reading.channel === 'optical' ? 'OPT' : 'XTL';
  const decimals = reading.channel === 'optical' ? OPTICAL_DECIMALS : CRYSTAL_DECIMALS;
  return `${tag},${fixed(reading.timeS, TIME_DECIMALS)},${fixed(reading.value, decimals)}\n`;
}

/** The forms the chamber writes spectra in (the chamber file reads them with `FRINGE_SPECTRUM_TABLE` or `FRINGE_SPECTRUM_JSON`). */
export type SpectrumLineForm = 'table' | 'json';

/** The grid's header line: `SPW,<nm>,…\n` or `{"ch":"spectral","nm":[…]}\n`. */
export function formatSpectrumHeader(wavelengthsNm: ArrayLike<number>, form: SpectrumLineForm): string {
  const nm = Array.from(wavelengthsNm);
  return form === 'table' ? `SPW,${nm.join(',')}\n` : `${JSON.stringify({ ch: 'spectral', nm })}\n`;
}

/** One spectrum's line: `SPC,<time_s>,<value>,…\n` or `{"ch":"spectral","t":…,"v":[…]}\n`. */
export function formatSpectrum(spectrum: SpectrumReading, form: SpectrumLineForm): string {
  const values = Array.from(spectrum.values, (v) => fixed(v, OPTICAL_DECIMALS));
  const t = fixed(spectrum.timeS, TIME_DECIMALS);
  return form === 'table' ? `SPC,${t},${values.join(',')}\n` : `{"ch":"spectral","t":${t},"v":[${values.join(',')}]}\n`;
}

/** `SHUTTER <source> OPEN|CLOSE <layer>\n`. */
export function formatShutterCommand(command: ShutterCommand): string {
  return `SHUTTER ${command.source} ${command.action === 'open' ? 'OPEN' : 'CLOSE'} ${command.layer}\n`;
}

/** `ACK <source> OPEN|CLOSE <time_s>\n`. */
export function formatAck(ack: ShutterAck): string {
  return `ACK ${ack.source} ${ack.action === 'open' ? 'OPEN' : 'CLOSE'} ${fixed(ack.timeS, TIME_DECIMALS)}\n`;
}

function fault(channel: ChannelKind | 'unknown', code: FaultCode, line: string, offset: number, arrivalS: number): Fault {
  return { kind: 'fault', channel, code, line: line.slice(0, 200), offset, arrivalS };
}

/** The line without its LF (or CRLF). */
function body(line: string): string {
  if (line.endsWith('\r\n')) return line.slice(0, -2);
  if (line.endsWith('\n')) return line.slice(0, -1);
  return line;
}

/** Splits on `separator`, keeping each field's start offset. */
function fields(text: string, separator: string): { text: string; at: number }[] {
  const out: { text: string; at: number }[] = [];
  let at = 0;
  for (const part of text.split(separator)) {
    out.push({ text: part, at });
    at += part.length + 1;
  }
  return out;
}

/** A reading line (`OPT,…` or `XTL,…`), arriving at host time `arrivalS`. */
export function parseReadingLine(line: string, arrivalS: number): Reading | Fault {
  const text = body(line);
  if (text.length > MAX_LINE_CHARS) return fault('unknown', 'line-too-long', line, MAX_LINE_CHARS, arrivalS);
  const parts = fields(text, ',');
  const tag = (parts[0] as { text: string }).text;
  const channel: ChannelKind | undefined = tag === 'OPT' ? 'optical' : tag === 'XTL' ? 'crystal' : undefined;
  if (channel === undefined) return fault('unknown', 'unknown-channel', line, 0, arrivalS);
  if (parts.length !== 3) {
    return fault(channel, 'garbled', line, parts.length > 3 ? (parts[3] as { at: number }).at - 1 : text.length, arrivalS);
  }
  const [, time, value] = parts as [unknown, { text: string; at: number }, { text: string; at: number }];
  if (!NUMBER.test(time.text)) return fault(channel, 'not-a-number', line, time.at, arrivalS);
  if (!NUMBER.test(value.text)) return fault(channel, 'not-a-number', line, value.at, arrivalS);
  const timeS = Number(time.text);
  const v = Number(value.text);
  if (timeS < 0) return fault(channel, 'out-of-range', line, time.at, arrivalS);
  if (channel === 'crystal' && !(v > 0)) return fault(channel, 'out-of-range', line, value.at, arrivalS);
  return { kind: 'reading', channel, value: v, timeS, arrivalS };
}

/** Source, action and the last field of a `SHUTTER`/`ACK` line, or a fault. */
function parseShutterWords(line: string, keyword: string, arrivalS: number): { source: string; action: 'open' | 'close'; last: { text: string; at: number } } | Fault {
  const text = body(line);
  if (text.length > MAX_LINE_CHARS) return fault('unknown', 'line-too-long', line, MAX_LINE_CHARS, arrivalS);
  const parts = fields(text, ' ');
  if ((parts[0] as { text: string }).text !== keyword) return fault('unknown', 'garbled', line, 0, arrivalS);
  if (parts.length !== 4) return fault('unknown', 'garbled', line, parts.length > 4 ? (parts[4] as { at: number }).at - 1 : text.length, arrivalS);
  const [, source, action, last] = parts as [unknown, { text: string; at: number }, { text: string; at: number }, { text: string; at: number }];
  if (!SOURCE.test(source.text)) return fault('unknown', 'garbled', line, source.at, arrivalS);
  if (action.text !== 'OPEN' && action.text !== 'CLOSE') return fault('unknown', 'garbled', line, action.at, arrivalS);
  return { source: source.text, action: action.text === 'OPEN' ? 'open' : 'close', last };
}

/** A host's `SHUTTER` line, received at run time `timeS` (the command's time). */
export function parseShutterCommand(line: string, timeS: number): ShutterCommand | Fault {
  const words = parseShutterWords(line, 'SHUTTER', timeS);
  if ('kind' in words) return words;
  const { text, at } = words.last;
  if (!/^\d+$/.test(text)) return fault('unknown', 'not-a-number', line, at, timeS);
  const layer = Number(text);
  if (layer < 1 || !Number.isSafeInteger(layer)) return fault('unknown', 'out-of-range', line, at, timeS);
  return { kind: 'shutter', action: words.action, source: words.source, layer, timeS };
}

/** A chamber's `ACK` line, arriving at host time `arrivalS` (the fault's time, if it is bad). */
export function parseAck(line: string, arrivalS: number): ShutterAck | Fault {
  const words = parseShutterWords(line, 'ACK', arrivalS);
  if ('kind' in words) return words;
  const { text, at } = words.last;
  if (!NUMBER.test(text)) return fault('unknown', 'not-a-number', line, at, arrivalS);
  const timeS = Number(text);
  if (timeS < 0) return fault('unknown', 'out-of-range', line, at, arrivalS);
  return { kind: 'shutter-ack', action: words.action, source: words.source, timeS };
}
