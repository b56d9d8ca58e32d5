// The line source over a serial port (MockBinding): readings and faults, the status stream
// (connecting, connected, stale, lost), reconnection with exponential back-off after the port
// goes away, and close(). Timers and the clock are virtual (vitest fake timers), so the test
// is fast and deterministic.
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { createLineSource, type LineSource, type LineSourceOptions } from '../../drivers/line-source.ts';
import { createSerialTransport } from '../../drivers/transport.ts';
import { ConfigError } from '../../src/config/validation.ts';
import type { Fault, InstrumentReading, SourceStatus } from '../../src/pipeline/types.ts';
import { createMockSerial, settle, until, type MockSerial } from './mock-serial.ts';

let serial: MockSerial;
let source: LineSource | undefined;

beforeEach(() => {
  vi.useFakeTimers({ toFake: ['setTimeout', 'clearTimeout', 'Date'] });
  vi.setSystemTime(0);
  serial = createMockSerial('/dev/ROBOT');
});

afterEach(async () => {
  await source?.close();
  source = undefined;
  vi.useRealTimers();
});

function open(options: Partial<LineSourceOptions> = {}) {
  const s = createLineSource({
    transport: () => createSerialTransport({ path: '/dev/ROBOT', baudRate: 115200, binding: serial.binding }),
    // Host seconds from the (fake) wall clock, so readings' arrival times are exact.
    clock: () => Date.now() / 1000,
    retry: { initialDelayMs: 100, maxDelayMs: 300, factor: 2 },
    staleAfterS: 2,
    ...options,
  });
  source = s;
  const readings: Array<InstrumentReading | Fault> = [];
  const statuses: SourceStatus[] = [];
  let readingsDone = false;
  let statusDone = false;
  s.readings.subscribe({ next: (r) => readings.push(r), complete: () => (readingsDone = true) });
  s.status.subscribe({ next: (st) => statuses.push(st), complete: () => (statusDone = true) });
  return { s, readings, statuses, done: () => readingsDone && statusDone };
}

const states = (statuses: readonly SourceStatus[]): string[] => statuses.map((s) => (s.state === 'lost' ? `lost(${s.closedByUs ? 'us' : 'them'})` : s.state));

describe('createLineSource over a serial port', () => {
  it('connects, frames and decodes, and keeps faults in the stream', async () => {
    const { readings, statuses } = open();
    await until(() => serial.opened.length === 1 && statuses.at(-1)?.state === 'connected', 'the port to open');
    expect(states(statuses)).toEqual(['connecting', 'connected']);
    expect(statuses[1]).toMatchObject({ detail: 'serial /dev/ROBOT at 115200 Bd' });

    vi.setSystemTime(1500);
    serial.last().emitData('OPT,0.10,0.5012\nXTL,0.1');
    await until(() => readings.length === 1, 'the first reading');
    vi.setSystemTime(1750);
    serial.last().emitData('0,5998000.5\r\nACK SiO2 OPEN 0.11\nOPT,0.20,abc\n\n');
    await until(() => readings.length === 3, 'three items');
    expect(readings).toEqual([
      { kind: 'reading', channel: 'optical', value: 0.5012, timeS: 0.1, arrivalS: 1.5 },
      { kind: 'reading', channel: 'crystal', value: 5998000.5, timeS: 0.1, arrivalS: 1.75 },
      { kind: 'fault', channel: 'optical', code: 'not-a-number', line: 'OPT,0.20,abc', offset: 9, arrivalS: 1.75 },
    ]);
  });

  it('reports a quiet port as stale and a fresh line as connected again', async () => {
    const { statuses } = open();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    await vi.advanceTimersByTimeAsync(1999);
    expect(statuses.at(-1)?.state).toBe('connected');
    await vi.advanceTimersByTimeAsync(1);
    expect(statuses.at(-1)).toMatchObject({ state: 'stale', detail: 'no line for 2.0 s from serial /dev/ROBOT at 115200 Bd' });
    // Staying quiet does not repeat the status.
    await vi.advanceTimersByTimeAsync(5000);
    expect(states(statuses)).toEqual(['connecting', 'connected', 'stale']);

    serial.last().emitData('OPT,9,0.5\n');
    await until(() => statuses.at(-1)?.state === 'connected', 'connected again');
    // A partial line is not a line: it does not keep the source fresh.
    await vi.advanceTimersByTimeAsync(1000);
    serial.last().emitData('OPT,9.1');
    await vi.advanceTimersByTimeAsync(1000);
    expect(states(statuses)).toEqual(['connecting', 'connected', 'stale', 'connected', 'stale']);
  });

  it('reconnects with exponential back-off after the port goes away, and reads again', async () => {
    const { readings, statuses } = open();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    serial.last().emitData('OPT,1,0.25\n');
    await until(() => readings.length === 1, 'a reading');

    // The adapter is pulled out, and the next three opens fail.
    serial.refuseOpens(3);
    vi.setSystemTime(10_000);
    serial.last().unplug('device unplugged');
    await until(() => statuses.at(-1)?.state === 'lost', 'lost');
    expect(statuses.at(-1)).toEqual({ state: 'lost', closedByUs: false, detail: 'serial /dev/ROBOT at 115200 Bd: device unplugged; retrying in 100 ms' });

    // Attempts at +100 (refused), +300 (refused, after 200), +600 (refused, 300 = max), +900 (opens).
    await vi.advanceTimersByTimeAsync(99);
    await settle();
    expect(serial.attempts).toHaveLength(1);
    for (let i = 0; i < 9; i++) {
      await vi.advanceTimersByTimeAsync(100);
      await settle();
    }
    expect(serial.attempts.slice(1).map((t) => t - 10_000)).toEqual([100, 300, 600, 900]);
    expect(serial.opened).toHaveLength(2);
    const lost = statuses.filter((s) => s.state === 'lost').map((s) => s.detail?.replace(/^.*; /, ''));
    expect(lost).toEqual(['retrying in 100 ms', 'retrying in 200 ms', 'retrying in 300 ms', 'retrying in 300 ms']);
    expect(statuses.at(-1)?.state).toBe('connected');
    expect(states(statuses).slice(-3)).toEqual(['lost(them)', 'connecting', 'connected']);
    expect(statuses.filter((s) => s.state === 'lost').every((s) => s.state === 'lost' && !s.closedByUs)).toBe(true);

    serial.last().emitData('XTL,2,6000000\n');
    await until(() => readings.length === 2, 'a reading after the reconnect');
    expect(readings[1]).toMatchObject({ kind: 'reading', channel: 'crystal', value: 6e6 });
  });

  it('starts the back-off again after a connection that delivered lines', async () => {
    const { statuses } = open();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    serial.last().unplug();
    await until(() => statuses.at(-1)?.state === 'lost', 'lost');
    await vi.advanceTimersByTimeAsync(100);
    await until(() => statuses.at(-1)?.state === 'connected', 'connected again');
    // The second loss without a line in between waits longer...
    serial.last().unplug();
    await until(() => statuses.at(-1)?.state === 'lost', 'lost again');
    expect(statuses.at(-1)?.detail).toMatch(/retrying in 200 ms$/);
    await vi.advanceTimersByTimeAsync(200);
    await until(() => statuses.at(-1)?.state === 'connected', 'connected a third time');
    // ...but once lines flowed, the next loss starts from the initial delay.
    serial.last().emitData('OPT,1,0.5\n');
    await settle();
    serial.last().unplug();
    await until(() => statuses.at(-1)?.state === 'lost', 'lost a third time');
    expect(statuses.at(-1)?.detail).toMatch(/retrying in 100 ms$/);
  });

  it('fails a write while the port is down instead of queueing it', async () => {
    const { s, statuses } = open();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    await s.write('PING\n');
    await settle();
    expect(serial.last().recording.toString()).toBe('PING\n');
    serial.refuseOpens(100);
    serial.last().unplug();
    await until(() => statuses.at(-1)?.state === 'lost', 'lost');
    await expect(s.write('PING\n')).rejects.toThrow(/not connected/);
  });

  it('close() ends with lost(closedByUs) and completes both streams, and stops retrying', async () => {
    const { s, statuses, done } = open();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    await s.close();
    expect(statuses.at(-1)).toMatchObject({ state: 'lost', closedByUs: true });
    expect(done()).toBe(true);
    expect(serial.last().isOpen).toBe(false);
    await vi.advanceTimersByTimeAsync(10_000);
    expect(serial.attempts).toHaveLength(1);
    // Closing twice is harmless.
    await s.close();
  });

  it('close() while the port keeps failing cancels the pending retry', async () => {
    serial.refuseOpens(100);
    const { s, statuses, done } = open();
    await until(() => statuses.at(-1)?.state === 'lost', 'the first failure');
    expect(statuses.at(-1)?.detail).toMatch(/cannot open: cannot open \/dev\/ROBOT: no such device; retrying in 100 ms$/);
    await s.close();
    await vi.advanceTimersByTimeAsync(10_000);
    expect(serial.attempts).toHaveLength(1);
    expect(states(statuses)).toEqual(['connecting', 'lost(them)', 'lost(us)']);
    expect(done()).toBe(true);
  });

  it('refuses bad options at construction, naming them', () => {
    const transport = () => createSerialTransport({ path: '/dev/ROBOT', binding: serial.binding });
    expect(() => createLineSource({ transport, staleAfterS: 0 })).toThrow(/staleAfterS/);
    expect(() => createLineSource({ transport, retry: { factor: 0.5 } })).toThrow(/retry\.factor/);
    expect(() => createLineSource({ transport, retry: { initialDelayMs: 500, maxDelayMs: 100 } })).toThrow(/retry\.maxDelayMs/);
    expect(() => createLineSource({ transport, framer: { maxLineBytes: -1 } })).toThrow(/framer\.maxLineBytes/);
    expect(() => createLineSource({ transport, dialect: { format: 'json', fields: {} } as never })).toThrow(/fields\.value/);
    expect(() => createLineSource({ transport: 'COM1' as never })).toThrow(ConfigError);
    expect(() => createSerialTransport({ path: '', binding: serial.binding })).toThrow(/path/);
    expect(() => createSerialTransport({ path: '/dev/ROBOT', parity: 'sometimes' as never })).toThrow(/parity/);
    expect(() => createLineSource({ transport, channels: ['uv'] as never })).toThrow(/channels/);
    expect(serial.attempts).toHaveLength(0);
  });

  it('turns a reading of a channel the source is not bound to into a fault', async () => {
    const { readings, statuses } = open({ channels: ['crystal'] });
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    serial.last().emitData('OPT,1,0.5\nXTL,1,6000000\n');
    await until(() => readings.length === 2, 'two items');
    expect(readings[0]).toMatchObject({ kind: 'fault', code: 'unknown-channel', line: 'OPT,1,0.5' });
    expect(readings[1]).toMatchObject({ kind: 'reading', channel: 'crystal' });
  });
});
