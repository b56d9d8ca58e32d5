/**
 * A measured spectrum of finished parts: the two-column export of a spectrophotometer,
 * wavelength in nm and transmittance or reflectance in percent or as a fraction.
 *
 * What is accepted: leading header lines (text before the first number pair, at most
 * {@link MAX_HEADER_LINES}), `#` comment lines and blank lines anywhere, columns separated by a
 * comma, a semicolon (then a comma inside a number is its decimal point, as European exports
 * write it), a tab or spaces, CR LF line ends and a byte-order mark. Wavelengths may come in any
 * order (scanning instruments often run from long to short) and are sorted. A wavelength given
 * twice is averaged, and counted twice in the fit: instruments that change detector or grating
 * mid-scan measure the overlap point twice, and both readings are honest measurements of the
 * same value (refusing would turn away most such exports; keeping one would waste the other).
 *
 * Percent or fraction: a header that shows `%` or the word percent says percent; otherwise values above
 * {@link FRACTION_CEILING} can only be percent; otherwise the file is read as fractions (the
 * result says which and why, so a low-reflectance file in percent that never exceeds 1 % can be
 * told with `scale`).
 *
 * Anything else is refused with one sentence naming the file and the line.
 */
import { readFileSync, statSync } from 'node:fs';
import { fileErrorReason } from '../files/writable-folder.ts';

export type SpectrumQuantity = 'T' | 'R';
export type SpectrumScale = 'percent' | 'fraction';

export interface MeasuredSpectrum {
  /** Where it came from (a file name, or a label for text given directly). */
  readonly source: string;
  readonly quantity: SpectrumQuantity;
  /** How the values were read, and why. */
  readonly scale: SpectrumScale;
  readonly scaleReason: 'header' | 'values above 1.05' | 'all values within 0..1.05' | 'given';
  /** Ascending, distinct, nm. */
  readonly wavelengthsNm: Float64Array;
  /** Fractions 0..1 (a little beyond, from noise), the mean where a wavelength came twice. */
  readonly values: Float64Array;
  /** How many readings each value is the mean of. */
  readonly counts: Float64Array;
  /** The header lines, as given. */
  readonly header: readonly string[];
  /** Wavelengths that were given more than once. */
  readonly duplicatedWavelengths: number;
}

export class MeasuredSpectrumError extends Error {
  override name = 'MeasuredSpectrumError';
}

/** Header lines allowed before the first number pair. */
export const MAX_HEADER_LINES = 10;
/** A fraction never exceeds 1 by more than noise does; a value above this is a percentage. */
export const FRACTION_CEILING = 1.05;
/** The largest file read, bytes (a 1 nm scan of 190–3300 nm is about 60 KiB). */
export const MAX_SPECTRUM_BYTES = 8 * 1024 * 1024;
/** How far beyond 0..100 % a reading may lie (noise at the ends of the scale), in percent. */
const ALLOWANCE_PERCENT = 5;

const NUMBER = /^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$/;

export interface ParseSpectrumOptions {
  quantity: SpectrumQuantity;
  /** Percent or fraction, when the user says (otherwise detected). */
  scale?: SpectrumScale;
}

/** Reads and parses a spectrum file; every refusal is one sentence naming the file. */
export function readMeasuredSpectrum(file: string, options: ParseSpectrumOptions): MeasuredSpectrum {
  let text: string;
  try {
    const stat = statSync(file);
    if (!stat.isFile()) throw new MeasuredSpectrumError(`${file} is not a regular file, so it is no measured spectrum`);
    if (stat.size > MAX_SPECTRUM_BYTES) throw new MeasuredSpectrumError(`${file} is ${stat.size} bytes, more than the ${MAX_SPECTRUM_BYTES} a measured spectrum may be`);
    text = readFileSync(file, 'utf8');
  } catch (error) {
    if (error instanceof MeasuredSpectrumError) throw error;
    throw new MeasuredSpectrumError(`${file} cannot be read: ${fileErrorReason(error)}`);
  }
  return parseMeasuredSpectrum(text, file, options);
}

/** Parses the text of a spectrum export (see the module notes for what is accepted). */
export function parseMeasuredSpectrum(text: string, source: string, options: ParseSpectrumOptions): MeasuredSpectrum {
  const lines = text.replace(/^\uFEFF/, '').split(/\r?\n/);
  const header: string[] = [];
  const pairs: { wavelengthNm: number; value: number; line: number }[] = [];
  for (let i = 0; i < lines.length; i++) {
    const lineNumber = i + 1;
    const raw = lines[i] as string;
    const line = raw.trim();
    if (line === '' || line.startsWith('#')) continue;
    // eslint-disable-next-line no-control-regex
    if (/[\u0000-\u0008\u000b\u000c\u000e-\u001f\u007f\ufffd]/.test(line)) {
      throw new MeasuredSpectrumError(`${source} line ${lineNumber} holds control characters or bytes that are not text: it is no spectrophotometer export`);
    }
    const fields = splitFields(line);
    const numeric = fields !== null && fields.every((f) => NUMBER.test(f));
    if (!numeric) {
      if (pairs.length === 0) {
        if (header.length >= MAX_HEADER_LINES) {
          throw new MeasuredSpectrumError(`${source} line ${lineNumber}: still no wavelength and value after ${MAX_HEADER_LINES} header lines`);
        }
        header.push(line);
        continue;
      }
      throw new MeasuredSpectrumError(`${source} line ${lineNumber}: expected a wavelength in nm and a ${options.quantity} value, found "${clip(line)}"`);
    }
    const cols = fields;
    if (cols.length !== 2) {
      throw new MeasuredSpectrumError(`${source} line ${lineNumber}: expected two columns (wavelength in nm and ${options.quantity}), found ${cols.length}`);
    }
    const wavelengthNm = Number(cols[0]);
    const value = Number(cols[1]);
    if (!(wavelengthNm > 0) || !Number.isFinite(wavelengthNm)) {
      throw new MeasuredSpectrumError(`${source} line ${lineNumber}: the wavelength ${cols[0]} is not a positive number of nanometres`);
    }
    if (!Number.isFinite(value)) throw new MeasuredSpectrumError(`${source} line ${lineNumber}: the value ${cols[1]} is not a finite number`);
    pairs.push({ wavelengthNm, value, line: lineNumber });
  }
  if (pairs.length === 0) {
    throw new MeasuredSpectrumError(`${source} holds no wavelength and value pair: expected two columns, wavelength in nm and ${options.quantity}`);
  }

  let scale: SpectrumScale;
  let scaleReason: MeasuredSpectrum['scaleReason'];
  const largest = Math.max(...pairs.map((p) => p.value));
  if (options.scale) {
    scale = options.scale;
    scaleReason = 'given';
  } else if (header.some((h) => h.includes('%') || /percent/i.test(h))) {
    scale = 'percent';
    scaleReason = 'header';
  } else if (largest > FRACTION_CEILING) {
    scale = 'percent';
    scaleReason = 'values above 1.05';
  } else {
    scale = 'fraction';
    scaleReason = 'all values within 0..1.05';
  }
  const toFraction = scale === 'percent' ? 0.01 : 1;
  const allowance = ALLOWANCE_PERCENT / 100;
  for (const p of pairs) {
    const f = p.value * toFraction;
    if (f < -allowance || f > 1 + allowance) {
      const shown = scale === 'percent' ? `${p.value} %` : `${p.value}`;
      throw new MeasuredSpectrumError(`${source} line ${p.line}: ${options.quantity} = ${shown} lies outside 0–100 % (read as ${scale}${scale === 'percent' ? '' : 's'})`);
    }
  }

  pairs.sort((a, b) => a.wavelengthNm - b.wavelengthNm);
  const wavelengths: number[] = [];
  const sums: number[] = [];
  const counts: number[] = [];
  let duplicated = 0;
  for (const p of pairs) {
    const last = wavelengths.length - 1;
    if (last >= 0 && wavelengths[last] === p.wavelengthNm) {
      if (counts[last] === 1) duplicated++;
      sums[last] = (sums[last] as number) + p.value * toFraction;
      counts[last] = (counts[last] as number) + 1;
    } else {
      wavelengths.push(p.wavelengthNm);
      sums.push(p.value * toFraction);
      counts.push(1);
    }
  }
  if (wavelengths.length < 2) throw new MeasuredSpectrumError(`${source} gives a value at one wavelength only; a spectrum needs at least two`);
  return {
    source,
    quantity: options.quantity,
    scale,
    scaleReason,
    wavelengthsNm: Float64Array.from(wavelengths),
    values: Float64Array.from(sums, (s, i) => s / (counts[i] as number)),
    counts: Float64Array.from(counts),
    header,
    duplicatedWavelengths: duplicated,
  };
}

/**
 * The fields of one line, or null when it has no separator at all. A semicolon line takes a
 * comma inside a field as the decimal point; a trailing separator (some exports end every line
 * with one) is dropped.
 */
function splitFields(line: string): string[] | null {
  let fields: string[];
  if (line.includes(';')) fields = line.split(';').map((f) => f.trim().replace(',', '.'));
  else if (line.includes('\t')) fields = line.split('\t').map((f) => f.trim());
  else if (line.includes(',')) fields = line.split(',').map((f) => f.trim());
  else fields = line.split(/\s+/);
  if (fields.length > 1 && fields[fields.length - 1] === '') fields.pop();
  return fields.length === 0 ? null : fields;
}

function clip(line: string): string {
  return line.length > 40 ? `${line.slice(0, 40)}…` : line;
}

/** The CSV form the reader takes and `fringe simulate --measured-out` writes: a header, then "nm,percent" rows. */
export function formatMeasuredSpectrum(quantity: SpectrumQuantity, wavelengthsNm: ArrayLike<number>, fractions: ArrayLike<number>, note?: string): string {
  const rows: string[] = [];
  if (note !== undefined) for (const line of note.split('\n')) rows.push(`# ${line}`);
  rows.push(`wavelength_nm,${quantity}_percent`);
  for (let i = 0; i < wavelengthsNm.length; i++) rows.push(`${(wavelengthsNm[i] as number).toFixed(1)},${(100 * (fractions[i] as number)).toFixed(3)}`);
  return `${rows.join('\n')}\n`;
}
