/**
 * `fringe run` as a process against the virtual chamber over TCP, through the fault relay, for
 * the fault tests: the relay's transforms see every line and know the run time of each reading
 * and when each layer's shutter opened (the chamber's ACK), so a fault is placed in run time,
 * not wall time. After the run the journal is checked against every reading line the relay
 * handed fringe: none may be missing.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { expect } from 'vitest';
import { loadSimProfile, serveOnTcp, type TcpServedChamber } from '../../sim/index.ts';
import type { SimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { readJournal, type JournalContents } from '../../src/journal/journal-reader.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { startFaultRelay, type FaultRelay } from '../support/fault-relay.ts';

export const root = fileURLToPath(new URL('../../', import.meta.url));
export const recipeFile = join(root, 'config/recipes/ar4-visible.yaml');
export const recipe = loadRecipe(recipeFile);
export const typicalProfile = loadSimProfile(join(root, 'config/sim/typical.yaml'));
/** The chamber runs at this multiple of real time: a run of the AR recipe lasts about 35 s. */
export const SPEED = 20;

export interface Fringe {
  child: ChildProcess;
  out: () => string;
  done: Promise<number | null>;
}

const children: ChildProcess[] = [];

/** Kills what the tests started that is still running. */
export function killChildren(): void {
  for (const c of children.splice(0)) if (c.exitCode === null && c.signalCode === null) c.kill('SIGKILL');
}

export function fringe(args: string[]): Fringe {
  const child = spawn(process.execPath, [join(root, 'src/cli/fringe.js'), ...args], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
  children.push(child);
  let out = '';
  child.stdout?.on('data', (d: Buffer) => (out += d.toString()));
  child.stderr?.on('data', (d: Buffer) => (out += d.toString()));
  return { child, out: () => out, done: new Promise((resolve) => child.once('exit', (code) => resolve(code))) };
}

/** Polls every 50 ms, for what no event of ours announces (another process's output). */
export async function waitFor(predicate: () => boolean, what: string, timeoutMs = 90_000): Promise<void> {
  for (const start = Date.now(); !predicate(); ) {
    if (Date.now() - start > timeoutMs) throw new Error(`timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

export function chamberFile(dir: string, transport: string): string {
  const file = join(dir, 'chamber.yaml');
  writeFileSync(
    file,
    `formatVersion: 1
name: fault test chamber
instruments:
  - id: monitor
    transport: ${transport}
    channels: [optical, crystal]
    retry: { initialDelayMs: 100, maxDelayMs: 1000 }
shutters:
  transport: monitor
  ack: { timeoutMs: 1000 }
`,
  );
  return file;
}

/** A reading line of fringe's format: its channel letter as the journal writes it, time and value. */
export function parseReadingLine(line: string): { c: 'o' | 'x'; t: number; v: number } | null {
  const m = /^(OPT|XTL),(-?\d+(?:\.\d+)?),(-?\d+(?:\.\d+)?)$/.exec(line);
  return m ? { c: m[1] === 'OPT' ? 'o' : 'x', t: Number(m[2]), v: Number(m[3]) } : null;
}

/**
 * Where the run stands as seen from the relay: the run time of the latest reading, and when the
 * shutter of each layer opened (the chamber's n-th `ACK … OPEN`).
 */
export interface RunView {
  readonly nowS: number;
  readonly openedAtS: readonly number[];
}

/** A transform of the lines to fringe that also sees the run view; returns as a relay transform does. */
export type ViewTransform = (line: string, view: RunView) => string | readonly string[] | null;

export function watchRun(relay: FaultRelay, transform: ViewTransform = (line) => line): RunView {
  const view = { nowS: 0, openedAtS: [] as number[] };
  relay.toClient.transform = (line) => {
    const reading = parseReadingLine(line);
    if (reading) view.nowS = reading.t;
    const ack = /^ACK \S+ OPEN (\S+)$/.exec(line);
    if (ack) view.openedAtS.push(Number(ack[1]));
    return transform(line, view);
  };
  return view;
}

/** Run time since layer `layer`'s shutter opened, s (−Infinity before it opened). */
export function intoLayer(view: RunView, layer: number): number {
  const opened = view.openedAtS[layer - 1];
  return opened === undefined ? Number.NEGATIVE_INFINITY : view.nowS - opened;
}

export interface FaultRun {
  dir: string;
  /** The chamber served in this process (none when `upstreamPort` names another). */
  server: TcpServedChamber | undefined;
  relay: FaultRelay;
  run: Fringe;
  runsDir: string;
  close(): Promise<void>;
}

/**
 * The chamber served on TCP (or the one at `upstreamPort`), the relay before it, and fringe run
 * through the relay on the instrument clock (or on `transport`, a chamber file's transport, when
 * something else connects to the relay).
 */
export async function startFaultRun(options: {
  seed: number;
  profile?: SimProfile;
  runsDir?: string;
  upstreamPort?: number;
  transform?: ViewTransform;
  transport?: (relayPort: number) => string;
}): Promise<FaultRun & { view: RunView }> {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-fault-'));
  const server = options.upstreamPort === undefined ? await serveOnTcp({ recipe, profile: options.profile ?? typicalProfile, seed: options.seed, speed: SPEED, port: 0 }) : undefined;
  const relay = await startFaultRelay({ upstream: { port: options.upstreamPort ?? (server as TcpServedChamber).port } });
  const view = watchRun(relay, options.transform);
  const runsDir = options.runsDir ?? join(dir, 'runs');
  const transport = options.transport?.(relay.port) ?? `{ kind: tcp, host: 127.0.0.1, port: ${relay.port} }`;
  const run = fringe(['run', '--chamber', chamberFile(dir, transport), '--clock', 'instrument', '--runs', runsDir, recipeFile]);
  return {
    dir,
    server,
    relay,
    run,
    runsDir,
    view,
    close: async () => {
      if (run.child.exitCode === null) run.child.kill('SIGKILL');
      await relay.close();
      await server?.close();
    },
  };
}

export function journalOf(runsDir: string): JournalContents {
  const runs = readdirSync(runsDir);
  expect(runs).toHaveLength(1);
  return readJournal(join(runsDir, runs[0] as string, 'journal.ndjson'));
}

export function eventsOf(journal: JournalContents): RunEvent[] {
  return journal.records.flatMap((r) => (r.k === 'e' ? [r.event] : []));
}

export function alertCodes(journal: JournalContents): string[] {
  return eventsOf(journal).flatMap((e) => (e.type === 'alert' ? [e.code] : []));
}

export function cuts(journal: JournalContents): { layer: number; reason: string }[] {
  return eventsOf(journal).flatMap((e) => (e.type === 'cut' ? [{ layer: e.layer, reason: e.reason }] : []));
}

/** Closes fringe asked of the chamber, as `layer` numbers, from the relay's log (after any transform). */
export function closesSent(relay: FaultRelay): number[] {
  return relay
    .lines('toUpstream')
    .flatMap((l) => l.sent)
    .flatMap((line) => {
      const m = /^SHUTTER \S+ CLOSE (\d+)$/.exec(line.trim());
      return m ? [Number(m[1])] : [];
    });
}

/**
 * Every reading line the relay handed fringe from the first the journal holds to the last is in
 * the journal, with its time and value; lines before the run started and after it ended are no
 * part of it. A line the relay sent just before it cut a connection may die in the socket:
 * `inFlight` excludes those. Returns how many lines were checked.
 */
export function expectEveryReadingJournalled(relay: FaultRelay, journal: JournalContents, inFlight: (line: { connection: number; seq: number }) => boolean = () => false): number {
  expect(relay.log[0]?.seq, 'the relay log holds every line of the run').toBe(1);
  const journalled = new Set<string>();
  for (const r of journal.records) if (r.k === 'r') journalled.add(`${r.c} ${r.t} ${r.v}`);
  const sent = relay.lines('toClient').flatMap((l) =>
    inFlight(l) ? [] : l.sent.flatMap((line) => {
      const reading = parseReadingLine(line.trim());
      return reading ? [{ line, key: `${reading.c} ${reading.t} ${reading.v}` }] : [];
    }),
  );
  const first = sent.findIndex((s) => journalled.has(s.key));
  const last = sent.findLastIndex((s) => journalled.has(s.key));
  const span = sent.slice(first, last + 1);
  const missing = span.filter((s) => !journalled.has(s.key)).map((s) => s.line);
  expect(first).toBeGreaterThanOrEqual(0);
  expect(missing, `${missing.length} of ${span.length} reading lines missing from the journal`).toEqual([]);
  return span.length;
}
