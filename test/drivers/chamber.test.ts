// Chamber files: the shipped examples load, bad files are refused with the path of every bad
// field, and a chamber opens its sources and its shutter output (over a MockBinding serial port).
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { stringify } from 'yaml';
import { loadChamber, openChamber, type Chamber } from '../../drivers/chamber.ts';
import { ConfigError } from '../../src/config/validation.ts';
import type { InstrumentReading, Fault, SourceStatus } from '../../src/pipeline/types.ts';
import { createMockSerial, settle, until } from './mock-serial.ts';

const root = new URL('../../config/chambers/', import.meta.url).pathname;
const dir = mkdtempSync(join(tmpdir(), 'fringe-chamber-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

let files = 0;
function write(data: unknown): string {
  const file = join(dir, `chamber-${files++}.yaml`);
  writeFileSync(file, typeof data === 'string' ? data : stringify(data));
  return file;
}

function problems(data: unknown): string[] {
  try {
    loadChamber(write(data));
  } catch (error) {
    expect(error).toBeInstanceOf(ConfigError);
    return (error as ConfigError).violations.map((v) => `${v.at}: ${v.message}`);
  }
  throw new Error('the chamber was accepted');
}

const minimal = () => ({
  formatVersion: 1,
  name: 'test chamber',
  instruments: [{ id: 'monitor', transport: { kind: 'tcp', host: '127.0.0.1', port: 7301 }, channels: ['optical', 'crystal'] }],
});

describe('the shipped chamber files', () => {
  it('sim-serial reads the simulator over a pseudo-terminal, in fringe format, with acknowledged shutters', () => {
    const chamber = loadChamber(join(root, 'sim-serial.yaml'));
    const [monitor] = chamber.instruments;
    expect(chamber.instruments).toHaveLength(1);
    expect(monitor?.transport).toMatchObject({ kind: 'serial', path: '/tmp/fringe-sim', baudRate: 115200, dataBits: 8, parity: 'none' });
    expect(monitor?.dialect).toMatchObject({ format: 'delimited', columns: { channel: 0, time: 1, value: 2 }, channelTags: { OPT: 'optical', XTL: 'crystal' } });
    expect(chamber.shutters).toMatchObject({ transport: 'monitor', ack: { timeoutMs: 1000 } });
    expect(Object.isFrozen(chamber.instruments[0])).toBe(true);
  });

  it('sim-tcp connects to 127.0.0.1:7301 and gets the default dialect, the same as spelled out in sim-serial', () => {
    const spectral = loadChamber(join(root, 'sim-tcp-spectral.yaml'));
    expect(spectral.instruments[0]?.channels).toEqual(['optical', 'crystal', 'spectral']);
    expect(spectral.instruments[0]?.spectrum).toMatchObject({ form: 'table', headerTag: 'SPW', rowTag: 'SPC', timeField: true });
    const tcp = loadChamber(join(root, 'sim-tcp.yaml'));
    const serial = loadChamber(join(root, 'sim-serial.yaml'));
    expect(tcp.instruments[0]?.transport).toMatchObject({ kind: 'tcp', host: '127.0.0.1', port: 7301 });
    expect(tcp.instruments[0]?.dialect).toEqual(serial.instruments[0]?.dialect);
    expect(tcp.shutters?.ack).toEqual(serial.shutters?.ack);
  });
});

describe('chamber validation', () => {
  it('accepts a minimal chamber and fills in the defaults', () => {
    const chamber = loadChamber(write(minimal()));
    expect(chamber.instruments[0]).toMatchObject({ staleAfterS: 2, retry: { initialDelayMs: 250, maxDelayMs: 10_000, factor: 2 }, framer: { maxLineBytes: 1024 } });
    expect(chamber.shutters).toBeUndefined();
  });

  it('names the path of every bad field at once', () => {
    const data = minimal() as Record<string, unknown>;
    data.formatVersion = 2;
    data.instruments = [
      { id: 'monitor', transport: { kind: 'serial', path: '/dev/ttyUSB0', baudrate: 9600 }, channels: ['optical'] },
      { id: 'crystal', transport: { kind: 'usb', path: 'x' }, channels: ['crystal', 'uv'], dialect: { format: 'delimited', columns: { channel: 0 } } },
    ];
    expect(problems(data)).toEqual([
      'formatVersion: expected one of 1, found 2',
      'instruments[0].transport: unknown key "baudrate" (a typo?)',
      expect.stringMatching(/^instruments\[1\]\.transport\.kind: /),
      expect.stringMatching(/^instruments\[1\]\.dialect\.columns\.value: expected number/),
      expect.stringMatching(/^instruments\[1\]\.channels\[1\]: expected one of "optical", "crystal", "spectral", found "uv"/),
    ]);
  });

  it('refuses two instruments on one channel, duplicate ids, and tags for channels the instrument does not feed', () => {
    const data = minimal();
    data.instruments = [
      { id: 'monitor', transport: { kind: 'tcp', host: 'a', port: 1 }, channels: ['optical'] },
      { id: 'monitor', transport: { kind: 'tcp', host: 'b', port: 2 }, channels: ['optical', 'crystal'] },
    ];
    expect(problems(data)).toEqual([
      'instruments[0].dialect.channelTags.XTL: crystal is not among this instrument\'s channels (optical), found "crystal"',
      'instruments[1].id: "monitor" is also instruments[0], found "monitor"',
      'instruments[1].channels[0]: optical is already fed by instruments[0], found "optical"',
    ]);
  });

  it('refuses shutters on an unknown instrument, and link settings for a shared port', () => {
    expect(problems({ ...minimal(), shutters: { transport: 'monitr', retry: { factor: 3 } } })).toEqual([
      'shutters.transport: no instrument "monitr" (instruments: monitor), found "monitr"',
      "shutters.retry: only for a port of the shutters' own; the link of \"monitr\" is set on that instrument, found an object",
    ]);
    expect(problems({ ...minimal(), shutters: { transport: 'monitor', commands: { SiO2: { close: 'SHUT {material}' } } } })).toEqual([
      'shutters.commands.SiO2.close: unknown placeholder {material}: use {source} or {layer}, found "SHUT {material}"',
    ]);
  });

  it('reports YAML syntax errors by line', () => {
    expect(problems('formatVersion: 1\nname: [unclosed\n')[0]).toMatch(/^line \d+, column \d+: /);
  });
});

describe('openChamber', () => {
  it('opens a source per instrument and a shutter output sharing its port', async () => {
    const serial = createMockSerial('/dev/ttyFAKE');
    const chamber: Chamber = loadChamber(
      write({
        formatVersion: 1,
        name: 'mock',
        instruments: [{ id: 'monitor', transport: { kind: 'serial', path: '/dev/ttyFAKE' }, channels: ['optical', 'crystal'] }],
        shutters: { transport: 'monitor', ack: { timeoutMs: 5000 } },
      }),
    );
    const drivers = openChamber(chamber, { binding: serial.binding, clock: () => 123 });
    const source = drivers.sources.get('monitor');
    expect(source).toBeDefined();
    const readings: Array<InstrumentReading | Fault> = [];
    const statuses: SourceStatus[] = [];
    source?.readings.subscribe((r) => readings.push(r));
    source?.status.subscribe((s) => statuses.push(s));
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    drivers.shutter?.send({ kind: 'shutter', action: 'open', source: 'SiO2', layer: 2, timeS: 5 });
    await settle();
    expect(serial.last().recording.toString()).toBe('SHUTTER SiO2 OPEN 2\n');
    serial.last().emitData('XTL,5.1,5990000\nACK SiO2 OPEN 5.12\n');
    await until(() => readings.length === 1, 'a reading');
    expect(readings[0]).toEqual({ kind: 'reading', channel: 'crystal', value: 5990000, timeS: 5.1, arrivalS: 123 });
    expect(drivers.shutterLink).toBeUndefined();
    await drivers.close();
    expect(statuses.at(-1)).toMatchObject({ state: 'lost', closedByUs: true });
  });

  it('gives the shutters a port of their own when the chamber says so', async () => {
    const serial = createMockSerial('/dev/ttyMON', '/dev/ttySHUT');
    const chamber = loadChamber(
      write({
        formatVersion: 1,
        name: 'two ports',
        instruments: [
          {
            id: 'monitor',
            transport: { kind: 'serial', path: '/dev/ttyMON' },
            dialect: { format: 'regex', pattern: '^T=(?<value>\\S+)%$', channel: 'optical', channels: { optical: { scale: 0.01 } } },
            channels: ['optical'],
          },
        ],
        shutters: {
          transport: { kind: 'serial', path: '/dev/ttySHUT', baudRate: 19200 },
          commands: { Ta2O5: { name: 'B', close: 'CLS {source}' } },
          lineEnding: 'cr',
          retry: { initialDelayMs: 50 },
        },
      }),
    );
    const drivers = openChamber(chamber, { binding: serial.binding, clock: () => 7 });
    const readings: Array<InstrumentReading | Fault> = [];
    const linkStatus: SourceStatus[] = [];
    drivers.sources.get('monitor')?.readings.subscribe((r) => readings.push(r));
    drivers.shutterLink?.status.subscribe((s) => linkStatus.push(s));
    await until(() => serial.opened.length === 2 && linkStatus.at(-1)?.state === 'connected', 'both ports open');
    expect(linkStatus.at(-1)?.detail).toBe('serial /dev/ttySHUT at 19200 Bd');
    drivers.shutter?.send({ kind: 'shutter', action: 'close', source: 'Ta2O5', layer: 9, timeS: 1 });
    await settle();
    expect(serial.last('/dev/ttySHUT').recording.toString()).toBe('CLS B\r');
    expect(serial.last('/dev/ttyMON').recording.toString()).toBe('');
    serial.last('/dev/ttyMON').emitData('T=45.5%\n');
    await until(() => readings.length === 1, 'a reading');
    expect(readings[0]).toMatchObject({ kind: 'reading', channel: 'optical', value: 0.455, timeS: 7 });
    await drivers.close();
    expect(linkStatus.at(-1)).toMatchObject({ state: 'lost', closedByUs: true });
  });
});
