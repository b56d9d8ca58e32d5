/**
 * `npm run soak -- --hours H` (or `--minutes M`; `--speed S`, default 20; `--estimator plain`):
 * simulated runs back to back for that long (test/soak/soak.ts), the figures printed and written
 * to test/soak/results.json. Exits 1 when a goal is missed: a journal short of what it was
 * handed, the heap grown by more than 20 MB from the first run's start to the end, or a step p99
 * (whole soak or any minute) of 1 ms or more.
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { runSoak } from './soak.ts';

const HEAP_GROWTH_GOAL_MB = 20;
const P99_GOAL_US = 1000;

function fail(sentence: string): never {
  console.error(sentence);
  process.exit(2);
}

const { values } = parseArgs({
  options: { hours: { type: 'string' }, minutes: { type: 'string' }, speed: { type: 'string' }, estimator: { type: 'string' } },
});
const positive = (name: string, text: string | undefined, fallback: number): number => {
  if (text === undefined) return fallback;
  const n = Number(text);
  if (!(Number.isFinite(n) && n > 0)) fail(`--${name} must be a positive number, got "${text}"`);
  return n;
};
const seconds = values.hours !== undefined ? positive('hours', values.hours, 0) * 3600 : positive('minutes', values.minutes, 2) * 60;
const speed = positive('speed', values.speed, 20);
const estimator = values.estimator ?? 'fit';
if (estimator !== 'fit' && estimator !== 'plain') fail(`--estimator must be fit or plain, got "${estimator}"`);

const runsDir = mkdtempSync(join(tmpdir(), 'fringe-soak-'));
console.log(`soak: ${(seconds / 60).toFixed(1)} min at ${speed}× real time, both channels at 1 kHz, 15 viewers reading and 5 not, estimator ${estimator}`);
const result = await runSoak({ seconds, speed, estimator, runsDir, log: (line) => console.log(`  ${line}`) });
rmSync(runsDir, { recursive: true, force: true });

const totals = result.runs.reduce(
  (t, r) => ({ readings: t.readings + r.readings, journal: t.journal + r.journalReadings, events: t.events + r.events, journalEvents: t.journalEvents + r.journalEvents, runTimeS: t.runTimeS + r.runTimeS }),
  { readings: 0, journal: 0, events: 0, journalEvents: 0, runTimeS: 0 },
);
const growth = result.heapEndMb - result.heapStartMb;
const figures = [
  { name: 'soak.wall', value: result.wallS / 60, unit: 'min', note: `${result.runs.length} runs, ${(totals.runTimeS / 3600).toFixed(2)} h of run time at ${speed}×` },
  { name: 'soak.readings', value: totals.readings, unit: 'readings', note: `journalled: ${totals.journal}` },
  { name: 'soak.events', value: totals.events, unit: 'events', note: `journalled: ${totals.journalEvents}` },
  { name: 'soak.heap.start', value: result.heapStartMb, unit: 'MB', note: 'after full collections, the first run about to start' },
  { name: 'soak.heap.end', value: result.heapEndMb, unit: 'MB', note: `after full collections, every run ended; the largest at a run's start ${result.heapMaxMb.toFixed(1)} MB` },
  { name: 'soak.step.p50', value: result.stepP50Us, unit: 'µs', note: `${result.steps} controller steps` },
  { name: 'soak.step.p99', value: result.stepP99Us, unit: 'µs', note: `the worst minute's p99 ${result.worstMinuteP99Us.toFixed(2)} µs; goal < ${P99_GOAL_US} µs` },
  { name: 'soak.step.max', value: result.stepMaxUs, unit: 'µs', note: 'the slowest step: a layer end (re-plan, chip refit)' },
  { name: 'soak.cut.max', value: result.cutMaxUs, unit: 'µs', note: `the slowest of ${result.cutSteps} steps that cut; its own cost, timed again, ${result.cutOwnMaxUs.toFixed(0)} µs` },
  { name: 'soak.viewers.skipped', value: result.runs.reduce((n, r) => n + r.feedDropped, 0), unit: 'times', note: 'a viewer that stopped reading skipped by the feed' },
];
for (const f of figures) console.log(`  ${f.name.padEnd(22)} ${f.value.toPrecision(4).padStart(12)} ${f.unit}   (${f.note})`);
writeFileSync(fileURLToPath(new URL('./results.json', import.meta.url)), `${JSON.stringify({ figures, result }, null, 2)}\n`);

const missed = [
  ...(result.journalsComplete ? [] : ['a journal lacks lines it was handed']),
  ...(growth > HEAP_GROWTH_GOAL_MB ? [`the heap grew by ${growth.toFixed(1)} MB`] : []),
  ...(result.stepP99Us >= P99_GOAL_US || result.worstMinuteP99Us >= P99_GOAL_US ? ['a step p99 reached 1 ms'] : []),
];
console.log(missed.length === 0 ? 'soak: every goal met' : `soak: goal missed: ${missed.join('; ')}`);
process.exit(missed.length === 0 ? 0 : 1);
