// The shutter output over a serial port (MockBinding records every byte written): the configured
// command bytes, acknowledgements matched to commands, `shutter-no-ack` when none comes within
// the timeout (and not when one does), `shutter-not-sent` when a command cannot go out, and a
// close re-sent until it is confirmed.
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { createLineSource, type LineSource } from '../../drivers/line-source.ts';
import { createShutterOutput, type ShutterOutput, type ShutterOutputOptions } from '../../drivers/shutter-output.ts';
import { createSerialTransport } from '../../drivers/transport.ts';
import type { ShutterAck, ShutterCommand, ShutterFault, SourceStatus } from '../../src/pipeline/types.ts';
import { createMockSerial, settle, until, type MockSerial } from './mock-serial.ts';

let serial: MockSerial;
let source: LineSource;
let statuses: SourceStatus[];

beforeEach(async () => {
  vi.useFakeTimers({ toFake: ['setTimeout', 'clearTimeout', 'Date'] });
  vi.setSystemTime(0);
  serial = createMockSerial('/dev/ROBOT');
  source = createLineSource({
    transport: () => createSerialTransport({ path: '/dev/ROBOT', baudRate: 9600, binding: serial.binding }),
    clock: () => Date.now() / 1000,
    retry: { initialDelayMs: 100 },
  });
  statuses = [];
  source.status.subscribe((s) => statuses.push(s));
  await until(() => statuses.at(-1)?.state === 'connected', 'connected');
});

afterEach(async () => {
  await source.close();
  vi.useRealTimers();
});

function output(options: Omit<ShutterOutputOptions, 'link'> = {}) {
  const shutter = createShutterOutput({ link: source, ...options });
  const acks: ShutterAck[] = [];
  const alerts: ShutterFault[] = [];
  shutter.acks.subscribe((a) => acks.push(a));
  shutter.faults.subscribe((a) => alerts.push(a));
  return { shutter, acks, alerts };
}

const command = (action: 'open' | 'close', source: string, layer: number, timeS = 10): ShutterCommand => ({ kind: 'shutter', action, source, layer, timeS });

async function written(): Promise<string> {
  await settle();
  return serial.last().recording.toString('latin1');
}

describe('createShutterOutput', () => {
  it("writes fringe's commands by default, each confirmed once written when no acknowledgement is configured", async () => {
    const { shutter, acks, alerts } = output();
    shutter.send(command('open', 'SiO2', 1, 1));
    shutter.send(command('close', 'SiO2', 1, 2));
    shutter.send(command('open', 'Ta2O5', 2, 3));
    expect(await written()).toBe('SHUTTER SiO2 OPEN 1\nSHUTTER SiO2 CLOSE 1\nSHUTTER Ta2O5 OPEN 2\n');
    expect(acks).toEqual([
      { kind: 'shutter-ack', action: 'open', source: 'SiO2', timeS: 1, confirmedBy: 'sent' },
      { kind: 'shutter-ack', action: 'close', source: 'SiO2', timeS: 2, confirmedBy: 'sent' },
      { kind: 'shutter-ack', action: 'open', source: 'Ta2O5', timeS: 3, confirmedBy: 'sent' },
    ]);
    expect(shutter.unconfirmedCloses()).toEqual([]);
    await vi.advanceTimersByTimeAsync(60_000);
    expect(alerts).toEqual([]);
  });

  it('writes configured templates with the instrument names and line ending', async () => {
    const { shutter } = output({
      commands: {
        Ta2O5: { name: '2', open: 'S{source}=1 ;L{layer}', close: 'S{source}=0 ;L{layer}' },
        default: { close: 'CLOSE {source}' },
      },
      lineEnding: 'crlf',
    });
    shutter.send(command('close', 'Ta2O5', 7));
    shutter.send(command('close', 'SiO2', 8));
    shutter.send(command('open', 'SiO2', 9));
    expect(await written()).toBe('S2=0 ;L7\r\nCLOSE SiO2\r\nSHUTTER SiO2 OPEN 9\r\n');
  });

  it('raises shutter-no-ack when no acknowledgement comes within the timeout, and never re-sends an open', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 250 } });
    shutter.send(command('open', 'SiO2', 4, 81.25));
    await vi.advanceTimersByTimeAsync(249);
    expect(alerts).toEqual([]);
    await vi.advanceTimersByTimeAsync(1);
    expect(alerts).toEqual([
      { kind: 'shutter-fault', code: 'shutter-no-ack', source: 'SiO2', action: 'open', layer: 4, attempt: 1, final: true, timeS: 81.25, detail: 'no acknowledgement within 250 ms of "SHUTTER SiO2 OPEN 4"' },
    ]);
    expect(acks).toEqual([]);
    // A late acknowledgement is still reported, and does not raise a second alert.
    serial.last().emitData('ACK SiO2 OPEN 81.9\n');
    await until(() => acks.length === 1, 'the late ack');
    await vi.advanceTimersByTimeAsync(1000);
    expect(alerts).toHaveLength(1);
    expect(await written()).toBe('SHUTTER SiO2 OPEN 4\n');
  });

  it('re-sends an unacknowledged close at each deadline, up to closeAttempts writes, then gives up and says so', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 250 }, closeAttempts: 3 });
    shutter.send(command('close', 'SiO2', 4, 81.25));
    await vi.advanceTimersByTimeAsync(250);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\n'.repeat(2));
    await vi.advanceTimersByTimeAsync(250);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\n'.repeat(3));
    expect(shutter.unconfirmedCloses()).toEqual(['SiO2']);
    await vi.advanceTimersByTimeAsync(250);
    expect(alerts.map((a) => [a.code, a.attempt, a.final])).toEqual([
      ['shutter-no-ack', 1, false],
      ['shutter-no-ack', 2, false],
      ['shutter-no-ack', 3, true],
    ]);
    expect(alerts[2]?.detail).toBe('no acknowledgement within 250 ms of "SHUTTER SiO2 CLOSE 4" (write 3 of 3)');
    // Given up on, it stays unconfirmed: settled() reports it at once rather than waiting.
    await vi.advanceTimersByTimeAsync(5000);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\n'.repeat(3));
    expect(shutter.unconfirmedCloses()).toEqual(['SiO2']);
    expect(await shutter.settled(10_000)).toEqual(['SiO2']);
    // An acknowledgement that comes after all confirms it.
    serial.last().emitData('ACK SiO2 CLOSE 90.5\n');
    await until(() => acks.length === 1, 'the late ack');
    expect(acks[0]).toEqual({ kind: 'shutter-ack', action: 'close', source: 'SiO2', timeS: 90.5 });
    expect(shutter.unconfirmedCloses()).toEqual([]);
  });

  it('stops re-sending a close once it is acknowledged, and settled() resolves with nothing open', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 250 } });
    shutter.send(command('close', 'SiO2', 4, 81.25));
    const settled = shutter.settled(10_000);
    await vi.advanceTimersByTimeAsync(260);
    serial.last().emitData('ACK SiO2 CLOSE 81.6\n');
    await until(() => acks.length === 1, 'the ack of the re-send');
    expect(await settled).toEqual([]);
    await vi.advanceTimersByTimeAsync(5000);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\n'.repeat(2));
    expect(alerts.map((a) => a.code)).toEqual(['shutter-no-ack']);
  });

  it('does not alert when the acknowledgement comes in time, and takes its time from the line', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 250 } });
    shutter.send(command('close', 'SiO2', 4, 81.25));
    await vi.advanceTimersByTimeAsync(200);
    serial.last().emitData('OPT,81.3,0.5\nACK SiO2 CLOSE 81.31\n');
    await until(() => acks.length === 1, 'the ack');
    expect(acks[0]).toEqual({ kind: 'shutter-ack', action: 'close', source: 'SiO2', timeS: 81.31 });
    await vi.advanceTimersByTimeAsync(1000);
    expect(alerts).toEqual([]);
  });

  it('matches acknowledgements to the right source and action', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 100 } });
    shutter.send(command('close', 'SiO2', 4));
    shutter.send(command('open', 'Ta2O5', 5));
    await settle();
    // An ACK for another action of the same source does not count.
    serial.last().emitData('ACK SiO2 OPEN 10.01\nACK Ta2O5 OPEN 10.02\n');
    await until(() => acks.length === 2, 'two acks');
    await vi.advanceTimersByTimeAsync(100);
    expect(alerts.map((a) => `${a.code} ${a.action} ${a.source}`)).toEqual(['shutter-no-ack close SiO2']);
  });

  it('reads a configured acknowledgement dialect, mapping instrument names back to sources', async () => {
    const { shutter, acks, alerts } = output({
      commands: { Ta2O5: { name: '2', open: 'S{source}=1', close: 'S{source}=0' }, SiO2: { name: '1', open: 'S{source}=1', close: 'S{source}=0' } },
      ack: { pattern: '^ok s(?<source>\\d)=(?<action>[01]) t=(?<time>\\d+)$', flags: 'i', words: { open: ['1'], close: ['0'] }, timeScale: 0.001, timeoutMs: 100 },
    });
    shutter.send(command('close', 'Ta2O5', 3));
    expect(await written()).toBe('S2=0\n');
    serial.last().emitData('OK S2=0 t=12500\n');
    await until(() => acks.length === 1, 'the ack');
    expect(acks[0]).toEqual({ kind: 'shutter-ack', action: 'close', source: 'Ta2O5', timeS: 12.5 });
    await vi.advanceTimersByTimeAsync(200);
    expect(alerts).toEqual([]);
  });

  it('uses the arrival time when the acknowledgement carries none, and confirms the oldest command without a source', async () => {
    const { shutter, acks, alerts } = output({ ack: { pattern: '^(?<action>DONE)$', words: { close: ['DONE'] }, timeoutMs: 100 } });
    shutter.send(command('close', 'SiO2', 4, 10));
    vi.setSystemTime(2500);
    shutter.send(command('close', 'Ta2O5', 5, 11));
    serial.last().emitData('DONE\n');
    await until(() => acks.length === 1, 'the ack');
    expect(acks[0]).toEqual({ kind: 'shutter-ack', action: 'close', source: 'SiO2', timeS: 2.5 });
    await vi.advanceTimersByTimeAsync(100);
    expect(alerts.map((a) => a.source)).toEqual(['Ta2O5']);
  });

  it('raises shutter-not-sent without waiting when the port is down, and sends the close when it is back', async () => {
    const { shutter, acks, alerts } = output({ ack: { timeoutMs: 100 } });
    serial.refuseOpens(3);
    serial.last().unplug();
    await until(() => statuses.at(-1)?.state === 'lost', 'lost');
    const unplugged = serial.opened.length;
    shutter.send(command('close', 'SiO2', 4, 55));
    shutter.send(command('open', 'Ta2O5', 5, 56));
    await settle();
    expect(alerts).toEqual([
      { kind: 'shutter-fault', code: 'shutter-not-sent', source: 'SiO2', action: 'close', layer: 4, attempt: 1, final: false, timeS: 55, detail: '"SHUTTER SiO2 CLOSE 4" not sent: serial /dev/ROBOT at 9600 Bd is not connected' },
      { kind: 'shutter-fault', code: 'shutter-not-sent', source: 'Ta2O5', action: 'open', layer: 5, attempt: 1, final: true, timeS: 56, detail: '"SHUTTER Ta2O5 OPEN 5" not sent: serial /dev/ROBOT at 9600 Bd is not connected' },
    ]);
    expect(shutter.unconfirmedCloses()).toEqual(['SiO2']);
    // The port comes back after three refused opens: the close goes out on it, the open does not.
    for (let ms = 0; ms < 5000 && statuses.at(-1)?.state !== 'connected'; ms += 20) await vi.advanceTimersByTimeAsync(20);
    expect(statuses.at(-1)?.state).toBe('connected');
    expect(serial.opened.length).toBeGreaterThan(unplugged);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\n');
    serial.last().emitData('ACK SiO2 CLOSE 58.5\n');
    await until(() => acks.length === 1, 'the ack');
    expect(shutter.unconfirmedCloses()).toEqual([]);
    expect(alerts).toHaveLength(2);
  });

  it('lets a newer command for the same shutter replace a close still on its way', async () => {
    const { shutter, alerts } = output({ ack: { timeoutMs: 100 } });
    shutter.send(command('close', 'SiO2', 4, 10));
    shutter.send(command('open', 'SiO2', 5, 11));
    expect(shutter.unconfirmedCloses()).toEqual([]);
    await vi.advanceTimersByTimeAsync(1000);
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 4\nSHUTTER SiO2 OPEN 5\n');
    expect(alerts.map((a) => `${a.code} ${a.action} ${a.final}`)).toEqual(['shutter-no-ack open true']);
  });

  it('refuses a source with no command when sources are listed without a default', async () => {
    const { shutter, alerts } = output({ commands: { SiO2: {} } });
    shutter.send(command('close', 'SiO', 2));
    shutter.send(command('close', 'constructor', 2));
    shutter.send(command('close', 'SiO2', 2));
    expect(await written()).toBe('SHUTTER SiO2 CLOSE 2\n');
    expect(alerts.map((a) => a.source)).toEqual(['SiO', 'constructor']);
    expect(alerts[0]).toMatchObject({ code: 'shutter-not-sent', source: 'SiO', detail: 'no command configured for source "SiO" (listed: SiO2)' });
  });

  it('never writes a source name that would break the line', async () => {
    const { shutter, alerts } = output();
    shutter.send(command('close', 'SiO2\nSHUTTER Ta2O5 OPEN', 2));
    expect(await written()).toBe('');
    expect(alerts[0]).toMatchObject({ code: 'shutter-not-sent' });
  });

  it('completes acks and faults when closed, and when the link closes', async () => {
    let closed: ShutterOutput;
    {
      const { shutter } = output({ ack: {} });
      closed = shutter;
    }
    let done = 0;
    closed.acks.subscribe({ complete: () => (done += 1) });
    closed.faults.subscribe({ complete: () => (done += 1) });
    closed.close();
    expect(done).toBe(2);

    const { shutter } = output({ ack: { timeoutMs: 100 } });
    let linkDone = 0;
    shutter.acks.subscribe({ complete: () => (linkDone += 1) });
    shutter.send(command('close', 'SiO2', 4));
    await source.close();
    expect(linkDone).toBe(1);
  });

  it('refuses bad options at construction, naming them', () => {
    const make = (options: Record<string, unknown>) => () => createShutterOutput({ link: source, ...options });
    expect(make({ commands: { SiO2: { close: 'SHUT {src}' } } })).toThrow(/commands\.SiO2\.close: unknown placeholder \{src\}/);
    expect(make({ commands: { SiO2: { close: 'A\nB' } } })).toThrow(/commands\.SiO2\.close: must not contain a line break/);
    expect(make({ commands: { SiO2: { shut: 'X' } } })).toThrow(/commands\.SiO2.*shut/);
    expect(make({ ack: { pattern: '^ACK (?<src>\\S+)$' } })).toThrow(/ack\.pattern: needs a named group \(\?<action>/);
    expect(make({ ack: { timeoutMs: 0 } })).toThrow(/ack\.timeoutMs/);
    expect(make({ lineEnding: 'LF' })).toThrow(/lineEnding/);
    expect(() => createShutterOutput({ link: undefined } as unknown as ShutterOutputOptions)).toThrow(/link/);
  });
});
