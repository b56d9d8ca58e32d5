// The real serial path end to end: the virtual chamber on one side of a pseudo-terminal pair
// (Debian socat), fringe's serialport driver on the other; then whole runs of the command line,
// a crash (SIGKILL) in the middle of one, and its resumption.
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { appendFileSync, existsSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { filter, firstValueFrom, take, toArray } from 'rxjs';
import { afterAll, describe, expect, it } from 'vitest';
import { createLineSource, createSerialTransport } from '../../drivers/index.ts';
import { createPtyPair, createVirtualChamber, loadSimProfile, serveOnPty } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import type { Reading } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const haveSocat = spawnSync('socat', ['-V'], { stdio: 'ignore' }).status === 0;
if (!haveSocat && process.env.CI === 'true') throw new Error('socat is missing under CI: .ci/run must install the Debian package socat');
const needsSocat = haveSocat ? describe : describe.skip;
if (!haveSocat) console.warn('skipping the serial end-to-end tests: the Debian package socat is not installed');

const recipeFile = join(root, 'config/recipes/ar4-visible.yaml');
const profileFile = join(root, 'config/sim/typical.yaml');
const children: ChildProcess[] = [];
afterAll(() => {
  for (const c of children) c.kill('SIGKILL');
});

function fringe(args: string[]): { child: ChildProcess; out: () => string; done: Promise<number | null> } {
  const child = spawn(process.execPath, [join(root, 'src/cli/fringe.js'), ...args], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
  children.push(child);
  let out = '';
  child.stdout?.on('data', (d: Buffer) => (out += d.toString()));
  child.stderr?.on('data', (d: Buffer) => (out += d.toString()));
  return { child, out: () => out, done: new Promise((resolve) => child.once('exit', (code) => resolve(code))) };
}

function chamberFile(dir: string, ptyPath: string): string {
  const file = join(dir, 'chamber.yaml');
  // The shipped chamber for the simulator, on this test's own pseudo-terminal.
  writeFileSync(
    file,
    `formatVersion: 1
name: test chamber
instruments:
  - id: monitor
    transport: { kind: serial, path: ${ptyPath}, baudRate: 115200 }
    channels: [optical, crystal]
shutters:
  transport: monitor
  ack: { pattern: "^ACK (?<source>\\\\S+) (?<action>OPEN|CLOSE) (?<time>\\\\S+)$", timeoutMs: 1000 }
`,
  );
  return file;
}

async function waitFor(predicate: () => boolean, timeoutMs: number): Promise<void> {
  for (const start = Date.now(); !predicate(); ) {
    if (Date.now() - start > timeoutMs) throw new Error('timed out');
    await new Promise((r) => setTimeout(r, 50));
  }
}

needsSocat('the virtual chamber through a real serial port', () => {
  it('delivers over a pseudo-terminal exactly the readings it makes in process', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-pty-'));
    const pair = await createPtyPair(join(dir, 'port'));
    const recipe = loadRecipe(recipeFile);
    const profile = loadSimProfile(profileFile);
    const served = await serveOnPty(pair, { recipe, profile, seed: 5, speed: 20 });
    const source = createLineSource({ transport: () => createSerialTransport({ path: pair.hostPath, baudRate: 115200 }) });
    const received = await firstValueFrom(
      source.readings.pipe(
        filter((r): r is Reading => r.kind === 'reading'),
        take(300),
        toArray(),
      ),
    );
    await source.close();
    await served.close();
    pair.close();
    // The same seed in process, no shutter moved in either: the lines carry 6 decimals of the
    // optical signal and 3 of the crystal frequency and of time (sim/line-format.ts).
    const replica = createVirtualChamber(recipe, profile, 5);
    const local: Reading[] = [];
    replica.advance((received[received.length - 1] as Reading).timeS, (r) => local.push(r));
    expect(received.length).toBe(300);
    received.forEach((r, i) => {
      const l = local[i] as Reading;
      expect(r.channel).toBe(l.channel);
      expect(Math.abs(r.timeS - l.timeS)).toBeLessThanOrEqual(0.0005 + 1e-12);
      expect(Math.abs(r.value - l.value)).toBeLessThanOrEqual((l.channel === 'optical' ? 0.5e-6 : 0.5e-3) + 1e-12);
    });
  });

  it('runs a whole recipe live over the serial path, and replays it exactly', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-live-'));
    const pty = join(dir, 'port');
    const serve = fringe(['simulate', recipeFile, '--serve', '--pty', pty, '--speed', '100', '--seed', '2']);
    await waitFor(() => existsSync(pty), 60_000);
    const runs = join(dir, 'runs');
    const run = fringe(['run', '--chamber', chamberFile(dir, pty), '--clock', 'instrument', '--runs', runs, recipeFile]);
    const code = await run.done;
    serve.child.kill('SIGTERM');
    expect(code, run.out()).toBe(0);
    const runDir = join(runs, readdirSync(runs)[0] as string);
    const journal = readJournal(join(runDir, 'journal.ndjson'));
    const cuts = journal.records.filter((r) => r.k === 'e' && r.event.type === 'cut');
    expect(cuts).toHaveLength(4);
    // The chamber at 100× delivers in bursts; the ticks keep its pace and refuse none of its readings.
    const faultAlerts = journal.records.flatMap((r) => (r.k === 'e' && r.event.type === 'alert' && r.event.code.startsWith('fault-') ? [r.event.message] : []));
    expect(faultAlerts).toEqual([]);
    const replay = fringe(['replay', runDir, '--json']);
    expect(await replay.done).toBe(0);
    const result = JSON.parse(replay.out()) as { differing: number; layers: unknown[] };
    expect(result.layers).toHaveLength(4);
    expect(result.differing).toBe(0);
  });

  it('survives SIGKILL mid-layer with its decisions on disk, and resumes', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-crash-'));
    const pty = join(dir, 'port');
    const serve = fringe(['simulate', recipeFile, '--serve', '--pty', pty, '--speed', '50', '--seed', '3']);
    await waitFor(() => existsSync(pty), 60_000);
    const runs = join(dir, 'runs');
    const chamber = chamberFile(dir, pty);
    const run = fringe(['run', '--chamber', chamber, '--clock', 'instrument', '--runs', runs, recipeFile]);
    // Kill it during layer 3, after layers 1 and 2 have been cut.
    await waitFor(() => /layer 3 TiO2/.test(run.out()), 30_000);
    await new Promise((r) => setTimeout(r, 1500));
    const printed = run.out();
    run.child.kill('SIGKILL');
    await run.done;
    const runDir = join(runs, readdirSync(runs)[0] as string);
    const journal = readJournal(join(runDir, 'journal.ndjson'));
    const events = journal.records.flatMap((r): RunEvent[] => (r.k === 'e' ? [r.event] : []));
    // Every cut and alert printed before the kill is in the journal (they are synced first).
    const printedCuts = [...printed.matchAll(/layer (\d+) cut/g)].map((m) => Number(m[1]));
    expect(printedCuts).toEqual([1, 2]);
    expect(events.filter((e) => e.type === 'cut').map((e) => (e as { layer: number }).layer)).toEqual(printedCuts);
    expect(events.filter((e) => e.type === 'alert').length).toBeGreaterThanOrEqual((printed.match(/ALERT/g) ?? []).length);
    // Readings: at most about a second of wall time (×50 run time) is lost.
    const lastReading = Math.max(...journal.records.flatMap((r) => (r.k === 'r' ? [r.t] : [])));
    const lastPrinted = Math.max(...[...printed.matchAll(/^\s*([\d.]+) s /gm)].map((m) => Number(m[1])));
    expect(lastReading).toBeGreaterThan(lastPrinted - 1.5 * 50);
    // A kill in the middle of a write leaves half a line: the resumed run must start on a fresh one.
    const journalFile = join(runDir, 'journal.ndjson');
    appendFileSync(journalFile, '{"k":"r","c":"o","t":12');
    const tornLine = readFileSync(journalFile, 'utf8').split('\n').length;
    // --resume continues layer 3 on the recorded (instrument) clock and finishes the run.
    const resumed = fringe(['run', '--resume', runDir]);
    const code = await resumed.done;
    serve.child.kill('SIGTERM');
    expect(code, resumed.out()).toBe(0);
    expect(resumed.out()).toMatch(/resuming .* at layer 3/);
    const after = readJournal(journalFile);
    expect(after.firstDamaged).toEqual([{ line: tornLine, reason: 'not JSON' }]);
    const cutLayers = after.records.flatMap((r) => (r.k === 'e' && r.event.type === 'cut' ? [r.event.layer] : []));
    expect(cutLayers).toEqual([1, 2, 3, 4]);
    // The time the run was down is no silence of the instruments: the fit goes on cutting.
    const afterResume = after.records.slice(after.records.findIndex((r) => r.k === 'm')).flatMap((r): RunEvent[] => (r.k === 'e' ? [r.event] : []));
    expect(afterResume.flatMap((e) => (e.type === 'alert' ? [e.code] : []))).not.toContain('crystal-lost');
    console.log(JSON.stringify(afterResume.filter((e) => e.type !== 'shutter').slice(0, 30)), resumed.out().slice(0, 3000));
    expect(afterResume.flatMap((e) => (e.type === 'cut' && e.layer === 3 ? [e.reason] : []))).toEqual(['model-fit']);
    // The journal says where the run was taken up, and the readings after it are on the
    // instrument's clock (on the arrival clock their time would be their arrival).
    const mark = after.records.findIndex((r) => r.k === 'm');
    expect(after.records[mark]).toMatchObject({ k: 'm', mark: 'resumed', meta: { clock: 'instrument', estimator: 'fit' } });
    const readingsAfter = after.records.slice(mark).flatMap((r) => (r.k === 'r' ? [r] : []));
    expect(readingsAfter.length).toBeGreaterThan(100);
    expect(readingsAfter.filter((r) => r.t === r.a)).toEqual([]);
    // And the whole run still replays, saying what it skipped and where it was resumed.
    const replay = fringe(['replay', runDir]);
    expect(await replay.done, replay.out()).toBe(0);
    expect(replay.out()).toMatch(/skipped 1 damaged line: line \d+ \(not JSON\)/);
    expect(replay.out()).toMatch(/resumed at \d+\.\d s/);
  }, 120000);
});
