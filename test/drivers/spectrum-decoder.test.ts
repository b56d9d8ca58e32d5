import { describe, expect, it } from 'vitest';
import { ChamberSchema } from '../../drivers/chamber.ts';
import {
  createSpectrumDecoder,
  FRINGE_SPECTRUM_JSON,
  FRINGE_SPECTRUM_TABLE,
  gridFromConfig,
  spectrumLineBytes,
  type SpectrumFormOptions,
} from '../../drivers/spectrum-decoder.ts';
import { ConfigError } from '../../src/config/validation.ts';
import type { Fault, SpectrumReading } from '../../src/pipeline/types.ts';

const spectrum = (out: unknown): SpectrumReading => {
  expect(out).toMatchObject({ kind: 'spectrum', channel: 'spectral' });
  return out as SpectrumReading;
};
const fault = (out: unknown, code: Fault['code']): Fault => {
  expect(out).toMatchObject({ kind: 'fault', channel: 'spectral', code });
  return out as Fault;
};

describe('the table form', () => {
  it('takes its grid from the header line and reads each spectrum line against it', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    expect(decoder.grid).toBeUndefined();
    expect(decoder.decode('SPW,400,402,404', 1)).toBeNull();
    expect(Array.from(decoder.grid ?? [])).toEqual([400, 402, 404]);
    const s = spectrum(decoder.decode('SPC,12.300,0.5,0.25,-0.001', 13));
    expect(Array.from(s.values)).toEqual([0.5, 0.25, -0.001]);
    expect(s.timeS).toBe(12.3);
    expect(s.arrivalS).toBe(13);
    expect(s.wavelengthsNm).toBe(decoder.grid); // one grid object per channel, never a copy
  });

  it('leaves another channel’s line on a shared port to the port’s other decoder', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    expect(decoder.decode('OPT,1.000,0.5', 1)).toBeUndefined();
    expect(decoder.decode('ACK TiO2 CLOSE 1.0', 1)).toBeUndefined();
    expect(decoder.decode('   ', 1)).toBeNull();
  });

  it('reads untagged rows with the arrival time, a configured grid, whitespace and percent', () => {
    const decoder = createSpectrumDecoder({ form: 'table', delimiter: 'whitespace', grid: { fromNm: 500, toNm: 504, stepNm: 2 }, scale: 0.01 });
    const s = spectrum(decoder.decode('50  25.5\t100', 7.5));
    expect(Array.from(s.values)).toEqual([0.5, 0.255, 1]);
    expect(s.timeS).toBe(7.5);
  });

  it('refuses a spectrum before any grid is known', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    expect(fault(decoder.decode('SPC,1.0,0.5,0.5', 1), 'grid-unknown').offset).toBe(8);
  });

  it('refuses a spectrum with too few or too many values, pointing at the place', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    decoder.decode('SPW,400,402,404', 0);
    const short = 'SPC,1.0,0.5,0.5';
    expect(fault(decoder.decode(short, 1), 'spectrum-length').offset).toBe(short.length);
    expect(fault(decoder.decode('SPC,1.0,0.5,0.5,0.5,0.5', 1), 'spectrum-length').offset).toBe(20);
  });

  it('refuses a value that is no finite number, or far outside 0..1', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    decoder.decode('SPW,400,402,404', 0);
    for (const bad of ['NaN', 'inf', '', '0x1', '1e400', 'abc']) {
      expect(fault(decoder.decode(`SPC,1.0,0.5,${bad},0.5`, 1), 'spectrum-not-finite').offset).toBe(12);
    }
    expect(fault(decoder.decode('SPC,1.0,0.5,0.5,1.6', 1), 'spectrum-out-of-range').offset).toBe(16);
    expect(fault(decoder.decode('SPC,1.0,-0.6,0.5,0.5', 1), 'spectrum-out-of-range').offset).toBe(8);
    expect(fault(decoder.decode('SPC,x,0.5,0.5,0.5', 1), 'not-a-number').offset).toBe(4);
  });

  it('refuses a header that is no strictly increasing list of wavelengths', () => {
    for (const bad of ['SPW,400,400,402', 'SPW,400,398', 'SPW,400,abc', 'SPW,-1,400', 'SPW,400', 'SPW']) {
      const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
      fault(decoder.decode(bad, 0), 'grid-invalid');
      expect(decoder.grid).toBeUndefined();
    }
    const small = createSpectrumDecoder({ ...FRINGE_SPECTRUM_TABLE, maxWavelengths: 3 });
    fault(small.decode('SPW,1,2,3,4', 0), 'grid-invalid');
  });

  it('refuses a header that changes mid-run and keeps the first grid', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_TABLE);
    decoder.decode('SPW,400,402,404', 0);
    expect(decoder.decode('SPW,400,402,404', 1)).toBeNull(); // the same header again: fine
    expect(fault(decoder.decode('SPW,400,402,406', 2), 'grid-changed').offset).toBe(12);
    fault(decoder.decode('SPW,400,402', 3), 'grid-changed');
    expect(Array.from(decoder.grid ?? [])).toEqual([400, 402, 404]);
    spectrum(decoder.decode('SPC,4,0.1,0.2,0.3', 4));
  });

  it('holds a configured grid against the instrument’s header, to a micro-nanometre', () => {
    const decoder = createSpectrumDecoder({ ...FRINGE_SPECTRUM_TABLE, grid: { fromNm: 400, toNm: 400.3, stepNm: 0.1 } });
    expect(decoder.grid?.length).toBe(4);
    expect(decoder.decode('SPW,400,400.1,400.2,400.3', 0)).toBeNull();
    fault(decoder.decode('SPW,400,400.1,400.2,400.4', 0), 'grid-changed');
  });
});

describe('the json form', () => {
  it('reads a header object, then spectra, and checks wavelengths that come with values', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_JSON);
    expect(decoder.decode('{"ch":"spectral","nm":[400,500]}', 0)).toBeNull();
    const s = spectrum(decoder.decode('{"ch":"spectral","t":2.5,"v":[0.5,0.75]}', 3));
    expect(Array.from(s.values)).toEqual([0.5, 0.75]);
    expect(s.timeS).toBe(2.5);
    spectrum(decoder.decode('{"ch":"spectral","t":2.6,"nm":[400,500],"v":[0.5,0.75]}', 3));
    fault(decoder.decode('{"ch":"spectral","t":2.7,"nm":[400,501],"v":[0.5,0.75]}', 3), 'grid-changed');
  });

  it('leaves lines that are not its objects to the port’s other decoder', () => {
    const decoder = createSpectrumDecoder(FRINGE_SPECTRUM_JSON);
    expect(decoder.decode('OPT,1.0,0.5', 0)).toBeUndefined();
    expect(decoder.decode('{"ch":"optical","v":0.5}', 0)).toBeUndefined();
    expect(decoder.decode('{not json', 0)).toBeUndefined();
  });

  it('refuses each kind of bad frame with its code', () => {
    const decoder = createSpectrumDecoder({ form: 'json', fields: { values: 'data.T', time: 'ms' }, timeScale: 0.001, grid: [400, 500, 600] });
    spectrum(decoder.decode('{"ms":1500,"data":{"T":[0.1,0.2,0.3]}}', 0));
    fault(decoder.decode('{"ms":1500,"data":{"T":[0.1,0.2]}}', 0), 'spectrum-length');
    fault(decoder.decode('{"ms":1500,"data":{"T":[0.1,null,0.3]}}', 0), 'spectrum-not-finite');
    fault(decoder.decode('{"ms":1500,"data":{"T":[0.1,"NaN",0.3]}}', 0), 'spectrum-not-finite');
    fault(decoder.decode('{"ms":1500,"data":{"T":[0.1,7,0.3]}}', 0), 'spectrum-out-of-range');
    fault(decoder.decode('{"ms":1500,"data":{"T":0.1}}', 0), 'garbled');
    fault(decoder.decode('{"data":{"T":[0.1,0.2,0.3]}}', 0), 'garbled');
    fault(decoder.decode('{"ms":1500,"data":{"T":[0.1,0.2', 0), 'garbled');
    fault(decoder.decode('[1,2]', 0), 'garbled');
    fault(decoder.decode('{"ms":"soon","data":{"T":[0.1,0.2,0.3]}}', 0), 'not-a-number');
  });
});

describe('the form’s options', () => {
  it('bounds a line by the grid’s size: a 251-wavelength grid allows a few kB, not a megabyte', () => {
    const grid = { fromNm: 400, toNm: 900, stepNm: 2 };
    expect(gridFromConfig(grid).length).toBe(251);
    const bytes = spectrumLineBytes({ ...FRINGE_SPECTRUM_TABLE, grid });
    expect(bytes).toBeGreaterThan(251 * 20);
    expect(bytes).toBeLessThan(8192);
    // Without a grid the header may bring up to maxWavelengths.
    expect(spectrumLineBytes({ ...FRINGE_SPECTRUM_TABLE, maxWavelengths: 4000 })).toBeGreaterThan(4000 * 20);
  });

  it('refuses options that cannot work, naming the option', () => {
    const bad: unknown[] = [
      { form: 'table' }, // no header tag and no grid
      { form: 'json', fields: { values: 'v' } }, // no wavelength field and no grid
      { form: 'table', grid: [400, 400, 500] },
      { form: 'table', grid: { fromNm: 500, toNm: 400, stepNm: 1 } },
      { form: 'table', headerTag: 'W', range: [1, 0] },
      { form: 'table', headerTag: 'W', scale: 0 },
      { form: 'table', headerTag: 'W', colour: 'red' },
      { form: 'csv', headerTag: 'W' },
    ];
    for (const options of bad) expect(() => createSpectrumDecoder(options as SpectrumFormOptions), JSON.stringify(options)).toThrow(ConfigError);
  });

  it('belongs in the chamber file with the spectral channel, and must tell its lines from a shared port’s others', () => {
    const base = { formatVersion: 1, name: 'c', instruments: [] as unknown[] };
    const tcp = { kind: 'tcp', host: '127.0.0.1', port: 7301 };
    const ok = ChamberSchema.safeParse({ ...base, instruments: [{ id: 'm', transport: tcp, channels: ['optical', 'crystal', 'spectral'], spectrum: FRINGE_SPECTRUM_TABLE }] });
    expect(ok.success).toBe(true);
    const alone = ChamberSchema.safeParse({ ...base, instruments: [{ id: 's', transport: tcp, channels: ['spectral'], spectrum: { form: 'table', grid: [400, 500] } }] });
    expect(alone.success).toBe(true);
    const paths = (value: unknown): string[] => {
      const r = ChamberSchema.safeParse(value);
      return r.success ? [] : r.error.issues.map((i) => i.path.join('.'));
    };
    expect(paths({ ...base, instruments: [{ id: 's', transport: tcp, channels: ['spectral'] }] })).toEqual(['instruments.0.spectrum']);
    expect(paths({ ...base, instruments: [{ id: 's', transport: tcp, channels: ['optical', 'crystal'], spectrum: FRINGE_SPECTRUM_TABLE }] })).toEqual(['instruments.0.spectrum']);
    expect(paths({ ...base, instruments: [{ id: 's', transport: tcp, channels: ['optical', 'crystal', 'spectral'], spectrum: { form: 'table', headerTag: 'W' } }] })).toEqual([
      'instruments.0.spectrum.rowTag',
    ]);
    expect(
      paths({
        ...base,
        instruments: [
          { id: 'a', transport: tcp, channels: ['spectral'], spectrum: FRINGE_SPECTRUM_TABLE },
          { id: 'b', transport: tcp, channels: ['spectral'], spectrum: FRINGE_SPECTRUM_TABLE },
        ],
      }),
    ).toEqual(['instruments.1.channels.0']);
  });
});
