/**
 * Lines to spectra: the spectral monitor's frames, configured in the chamber file like the other
 * dialects. Two forms:
 *
 * - `table`: a header line of wavelengths (nm), then one line of values per spectrum, fields
 *   split by a delimiter; the header starts with its tag (`headerTag`), a spectrum line with its
 *   own tag (`rowTag`) if it has one, then optionally its time, then the values:
 *
 *   ```text
 *   SPW,400,402,404,…,900
 *   SPC,12.300,0.912345,0.913001,…
 *   ```
 *
 * - `json`: one JSON object per line; `fields.values` names the array of values, `fields.time`
 *   the time, `fields.wavelengths` the grid. An object with wavelengths and no values is a header;
 *   with both, the wavelengths must be the grid in use. `match` picks this form's objects out of
 *   a port that carries other JSON lines too.
 *
 * The grid is fixed for the channel: the chamber file's `grid`, else the first valid header.
 * Values are scaled (`value · scale + offset`, e.g. 0.01 for percent) and must lie within
 * `range` (default −0.5…1.5: far outside 0..1 is no calibrated T or R). A frame that does not
 * match the grid is a fault with its own code, never an exception; a header that differs from the
 * grid in use is a `grid-changed` fault and the grid stays.
 *
 * Pure apart from the grid it learns (kept in the decoder's closure): no I/O, no clock.
 */
import { z } from 'zod';
import { validate } from '../src/config/validation.ts';
import { wavelengthRange } from '../src/model/plan/chip-spectrum.ts';
import type { Fault, FaultCode, SpectrumReading } from '../src/pipeline/types.ts';
import { toNumber } from './line-decoder.ts';
import { FAULT_LINE_CHARS } from './line-framer.ts';

const finite = z.number().finite();
/** Most wavelengths a grid may have (a spectrometer has a few thousand pixels at most). */
export const MAX_GRID_WAVELENGTHS = 16_384;

/** The grid as a list, or as a range `fromNm`, `fromNm + stepNm`, … up to `toNm` inclusive. */
const GridSchema = z.union([
  z
    .array(finite.positive())
    .min(2)
    .max(MAX_GRID_WAVELENGTHS)
    .refine((nm) => nm.every((v, i) => i === 0 || v > (nm[i - 1] as number)), 'wavelengths must be strictly increasing'),
  z
    .strictObject({ fromNm: finite.positive(), toNm: finite.positive(), stepNm: finite.positive() })
    .refine((g) => g.toNm > g.fromNm, { path: ['toNm'], message: 'must be above fromNm' })
    .refine((g) => (g.toNm - g.fromNm) / g.stepNm < MAX_GRID_WAVELENGTHS, { path: ['stepNm'], message: `gives more than ${MAX_GRID_WAVELENGTHS} wavelengths` }),
]);

const commonShape = {
  /** The instrument's wavelengths, nm. Absent: taken from its first header frame. */
  grid: GridSchema.optional(),
  /** Most wavelengths a header may carry when the grid comes from the instrument. Default 2048. */
  maxWavelengths: z.number().int().min(2).max(MAX_GRID_WAVELENGTHS).default(2048),
  /** Multiplies each raw value (0.01 for percent). Default 1. */
  scale: finite.refine((v) => v !== 0, 'must not be 0').default(1),
  /** Added after scaling, fraction. Default 0. */
  offset: finite.default(0),
  /** Plausible values after scaling, `[min, max]`; outside: a `spectrum-out-of-range` fault. Default [-0.5, 1.5]. */
  range: z
    .tuple([finite, finite])
    .refine(([min, max]) => min < max, 'the first value (min) must be below the second (max)')
    .default([-0.5, 1.5]),
  /** Multiplies the instrument's timestamp to give seconds (0.001 for milliseconds). Default 1. */
  timeScale: finite.positive().default(1),
};

export const TableSpectrumFormSchema = z.strictObject({
  form: z.literal('table'),
  /** Field separator; the word `whitespace` means runs of spaces and tabs. Default `,`. */
  delimiter: z.string().min(1).default(','),
  /** First field of the header line (the wavelengths follow). Needed unless `grid` is given. */
  headerTag: z.string().min(1).optional(),
  /** First field of a spectrum line. Absent: every other line is a spectrum (the port carries nothing else). */
  rowTag: z.string().min(1).optional(),
  /** A spectrum line has its time (s × `timeScale`) before the values. Default false: the arrival time. */
  timeField: z.boolean().default(false),
  ...commonShape,
});

/** A field name, or a dotted path into nested objects (`data.values`). */
const fieldPath = z.string().min(1);

export const JsonSpectrumFormSchema = z.strictObject({
  form: z.literal('json'),
  fields: z.strictObject({ values: fieldPath, time: fieldPath.optional(), wavelengths: fieldPath.optional() }),
  /** Only objects whose `field` equals `equals` are spectra or headers. Absent: every JSON object line. */
  match: z.strictObject({ field: fieldPath, equals: z.union([z.string(), finite]) }).optional(),
  ...commonShape,
});

export const SpectrumFormSchema = z
  .discriminatedUnion('form', [TableSpectrumFormSchema, JsonSpectrumFormSchema])
  .superRefine((f, ctx) => {
    if (f.grid !== undefined) return;
    if (f.form === 'table' && f.headerTag === undefined) {
      ctx.addIssue({ code: 'custom', path: ['headerTag'], message: 'needed when no grid is given: the first field of the wavelength header line' });
    }
    if (f.form === 'json' && f.fields.wavelengths === undefined) {
      ctx.addIssue({ code: 'custom', path: ['fields', 'wavelengths'], message: 'needed when no grid is given: the field of the wavelength header' });
    }
  });
export type SpectrumFormOptions = z.input<typeof SpectrumFormSchema>;
export type ResolvedSpectrumForm = z.output<typeof SpectrumFormSchema>;

/** fringe's own table form, spoken by the virtual chamber: `SPW,<nm>,…` then `SPC,<time_s>,<fraction>,…`. */
export const FRINGE_SPECTRUM_TABLE: SpectrumFormOptions = Object.freeze({ form: 'table', headerTag: 'SPW', rowTag: 'SPC', timeField: true });
/** fringe's own JSON form: `{"ch":"spectral","nm":[…]}` then `{"ch":"spectral","t":…,"v":[…]}`. */
export const FRINGE_SPECTRUM_JSON: SpectrumFormOptions = Object.freeze({
  form: 'json',
  fields: Object.freeze({ values: 'v', time: 't', wavelengths: 'nm' }),
  match: Object.freeze({ field: 'ch', equals: 'spectral' }),
});

/** Bytes allowed per value of a line (`-0.12345678901234567e-10,` is 25; a plain 6-decimal value 9). */
const BYTES_PER_VALUE = 24;
/** Room for the tags, the time and a JSON object's keys. */
const LINE_OVERHEAD_BYTES = 256;

/** The longest line the form may need: its grid's size (or `maxWavelengths`) × a generous width per value. */
export function spectrumLineBytes(options: SpectrumFormOptions): number {
  const o = validate(SpectrumFormSchema, options, 'spectrum form');
  const count = o.grid === undefined ? o.maxWavelengths : gridFromConfig(o.grid).length;
  return LINE_OVERHEAD_BYTES + BYTES_PER_VALUE * count;
}

/** The wavelengths a configured grid stands for. */
export function gridFromConfig(grid: NonNullable<ResolvedSpectrumForm['grid']>): Float64Array {
  if (Array.isArray(grid)) return Float64Array.from(grid);
  return wavelengthRange(grid);
}

/**
 * Decodes one line: a spectrum, a fault, null for a header taken (or a blank line), or
 * undefined for a line that is not of this form at all (another channel's line on a shared
 * port: the caller hands it to the port's other decoder).
 */
export interface SpectrumDecoder {
  decode(line: string, arrivalS: number): SpectrumReading | Fault | null | undefined;
  /** The grid in use, once known. */
  readonly grid: Float64Array | undefined;
}

/** Two wavelengths closer than this are the same (a grid re-sent as text against one computed from a range). */
const SAME_WAVELENGTH_NM = 1e-6;

interface Frame {
  /** Raw values and where each starts in the line; absent for a header-only frame. */
  readonly values?: { readonly raw: readonly unknown[]; readonly offsets: readonly number[] } | undefined;
  readonly wavelengths?: { readonly raw: readonly unknown[]; readonly offsets: readonly number[] } | undefined;
  readonly time?: { readonly raw: unknown; readonly offset: number } | undefined;
}
interface Failure {
  readonly fail: FaultCode;
  readonly offset: number;
}
/** A line's frame, a failure, or undefined when the line is not this form's. */
type Extractor = (line: string) => Frame | Failure | undefined;

/** Creates a decoder; a bad option throws a `ConfigError` naming it. */
export function createSpectrumDecoder(options: SpectrumFormOptions): SpectrumDecoder {
  const o = validate(SpectrumFormSchema, options, 'spectrum form');
  let grid = o.grid === undefined ? undefined : gridFromConfig(o.grid);
  const extract = o.form === 'table' ? tableExtractor(o) : jsonExtractor(o);
  const [min, max] = o.range;
  const { scale, offset, timeScale, maxWavelengths } = o;

  function takeGrid(line: string, w: NonNullable<Frame['wavelengths']>, arrivalS: number): Fault | null {
    const count = w.raw.length;
    if (count < 2 || count > Math.max(maxWavelengths, grid?.length ?? 0)) return fault(line, 'grid-invalid', w.offsets[0] ?? 0, arrivalS);
    const nm = new Float64Array(count);
    for (let i = 0; i < count; i++) {
      const v = toNumber(w.raw[i]);
      if (v === undefined || !(v > 0) || (i > 0 && !(v > (nm[i - 1] as number)))) return fault(line, 'grid-invalid', w.offsets[i] ?? 0, arrivalS);
      nm[i] = v;
    }
    if (grid === undefined) {
      grid = nm;
      return null;
    }
    if (nm.length !== grid.length) return fault(line, 'grid-changed', w.offsets[0] ?? 0, arrivalS);
    for (let i = 0; i < count; i++) {
      if (Math.abs((nm[i] as number) - (grid[i] as number)) > SAME_WAVELENGTH_NM) return fault(line, 'grid-changed', w.offsets[i] ?? 0, arrivalS);
    }
    return null;
  }

  return {
    get grid() {
      return grid;
    },
    decode(line, arrivalS) {
      if (line.trim() === '') return null;
      const frame = extract(line);
      if (frame === undefined) return undefined;
      if ('fail' in frame) return fault(line, frame.fail, frame.offset, arrivalS);
      if (frame.wavelengths !== undefined) {
        const problem = takeGrid(line, frame.wavelengths, arrivalS);
        if (problem !== null || frame.values === undefined) return problem;
      }
      const v = frame.values;
      if (v === undefined) return fault(line, 'garbled', 0, arrivalS);
      if (grid === undefined) return fault(line, 'grid-unknown', v.offsets[0] ?? 0, arrivalS);
      let timeS = arrivalS;
      if (frame.time !== undefined) {
        const t = toNumber(frame.time.raw);
        if (t === undefined) return fault(line, 'not-a-number', frame.time.offset, arrivalS);
        timeS = t * timeScale;
        if (!Number.isFinite(timeS)) return fault(line, 'out-of-range', frame.time.offset, arrivalS);
      }
      const count = grid.length;
      if (v.raw.length !== count) return fault(line, 'spectrum-length', v.raw.length > count ? (v.offsets[count] as number) : line.length, arrivalS);
      const values = new Float64Array(count);
      for (let i = 0; i < count; i++) {
        const raw = toNumber(v.raw[i]);
        const value = raw === undefined ? Number.NaN : raw * scale + offset;
        if (!Number.isFinite(value)) return fault(line, 'spectrum-not-finite', v.offsets[i] as number, arrivalS);
        if (!(value >= min && value <= max)) return fault(line, 'spectrum-out-of-range', v.offsets[i] as number, arrivalS);
        values[i] = value;
      }
      return { kind: 'spectrum', channel: 'spectral', wavelengthsNm: grid, values, timeS, arrivalS };
    },
  };
}

function fault(line: string, code: FaultCode, offset: number, arrivalS: number): Fault {
  return { kind: 'fault', channel: 'spectral', code, line: line.length > FAULT_LINE_CHARS ? line.slice(0, FAULT_LINE_CHARS) : line, offset, arrivalS };
}

/** Fields of a line and their offsets. */
function split(line: string, delimiter: string): { raw: string[]; offsets: number[] } {
  const raw: string[] = [];
  const offsets: number[] = [];
  if (delimiter === 'whitespace') {
    for (const match of line.matchAll(/[^ \t]+/g)) {
      raw.push(match[0]);
      offsets.push(match.index);
    }
    return { raw, offsets };
  }
  let start = 0;
  for (;;) {
    const end = line.indexOf(delimiter, start);
    const stop = end === -1 ? line.length : end;
    raw.push(line.slice(start, stop));
    offsets.push(start);
    if (end === -1) return { raw, offsets };
    start = end + delimiter.length;
  }
}

function tableExtractor(o: z.output<typeof TableSpectrumFormSchema>): Extractor {
  const { delimiter, headerTag, rowTag, timeField } = o;
  return (line) => {
    const fields = split(line, delimiter);
    const first = (fields.raw[0] as string).trim();
    if (headerTag !== undefined && first === headerTag) {
      return { wavelengths: { raw: fields.raw.slice(1), offsets: fields.offsets.slice(1) } };
    }
    let from = 0;
    if (rowTag !== undefined) {
      if (first !== rowTag) return undefined;
      from = 1;
    }
    if (timeField) {
      if (fields.raw.length <= from) return { fail: 'garbled', offset: line.length };
      const time = { raw: fields.raw[from], offset: fields.offsets[from] as number };
      return { time, values: { raw: fields.raw.slice(from + 1), offsets: fields.offsets.slice(from + 1) } };
    }
    return { values: { raw: fields.raw.slice(from), offsets: fields.offsets.slice(from) } };
  };
}

function jsonExtractor(o: z.output<typeof JsonSpectrumFormSchema>): Extractor {
  const paths = {
    values: o.fields.values.split('.'),
    time: o.fields.time?.split('.'),
    wavelengths: o.fields.wavelengths?.split('.'),
    match: o.match?.field.split('.'),
  };
  const equals = o.match?.equals;
  return (line) => {
    // Not an object: another decoder's line on a shared port (or, alone, garbage).
    if (line.trimStart()[0] !== '{') return o.match === undefined ? { fail: 'garbled', offset: 0 } : undefined;
    let data: unknown;
    try {
      data = JSON.parse(line);
    } catch (error) {
      if (o.match !== undefined) return undefined;
      const position = /position (\d+)/.exec((error as Error).message)?.[1];
      return { fail: 'garbled', offset: position === undefined ? 0 : Math.min(Number(position), line.length) };
    }
    const at = (path: readonly string[] | undefined): unknown => {
      if (path === undefined) return undefined;
      let here: unknown = data;
      for (const key of path) {
        if (here === null || typeof here !== 'object' || Array.isArray(here) || !Object.hasOwn(here, key)) return undefined;
        here = (here as Record<string, unknown>)[key];
      }
      return here;
    };
    if (paths.match !== undefined && at(paths.match) !== equals) return undefined;
    // Offsets: where each field's key is in the line (the first occurrence: good enough for a person).
    const keyAt = (path: readonly string[]): number => Math.max(0, line.indexOf(JSON.stringify(path[path.length - 1])));
    const list = (path: readonly string[] | undefined): Frame['values'] | Failure | undefined => {
      if (path === undefined) return undefined;
      const value = at(path);
      if (value === undefined) return undefined;
      if (!Array.isArray(value)) return { fail: 'garbled', offset: keyAt(path) };
      const offset = keyAt(path);
      return { raw: value, offsets: value.map(() => offset) };
    };
    const values = list(paths.values);
    const wavelengths = list(paths.wavelengths);
    if (values !== undefined && 'fail' in values) return values;
    if (wavelengths !== undefined && 'fail' in wavelengths) return wavelengths;
    if (values === undefined && wavelengths === undefined) return { fail: 'garbled', offset: 0 };
    const time = paths.time === undefined || values === undefined ? undefined : at(paths.time);
    if (paths.time !== undefined && values !== undefined && time === undefined) return { fail: 'garbled', offset: 0 };
    return {
      values,
      wavelengths,
      time: time === undefined ? undefined : { raw: time, offset: keyAt(paths.time as string[]) },
    };
  };
}
