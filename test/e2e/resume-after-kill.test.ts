// `fringe run` killed outright (SIGKILL) 20 s into layer 3, with the virtual chamber going on over
// TCP, then `fringe run --resume`: the resumed process starts from the state the journal holds
// (its dashboard shows the finished layers, their cuts, the alerts and the layer in progress as
// the run had them), leaves the interrupted layer's shutter open as the chamber has it and cuts
// the layer on its rule, loses and repeats nothing already journalled, and completes. The whole
// journal then replays with every decision the same, the killed part and the resumed part alike.
import { readFileSync, readdirSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import { journalConfirmsCloses, journalEstimator } from '../../src/journal/journal-format.ts';
import { readJournal, type JournalContents } from '../../src/journal/journal-reader.ts';
import { createController } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { replayJournal } from '../../src/pipeline/replay.ts';
import type { RunSnapshot } from '../../src/server/views.ts';
import { eventsOf, fringe, intoLayer, killChildren, parseReadingLine, recipe, SPEED, startFaultRun, waitFor, type FaultRun } from './fault-run.ts';

const cleanups: (() => unknown)[] = [];
afterEach(async () => {
  for (const c of cleanups.splice(0).reverse()) await c();
});
afterAll(killChildren);

const replayOf = (journal: JournalContents) =>
  replayJournal(journal.records, createController(recipe, { estimator: journalEstimator(journal.header), confirmCloses: journalConfirmsCloses(journal.header) }));

const shutterCommands = (fault: FaultRun, connection: number): string[] =>
  fault.relay
    .lines('toUpstream')
    .filter((l) => l.connection === connection)
    .flatMap((l) => l.sent.map((s) => s.trim()))
    .filter((s) => s.startsWith('SHUTTER'));

describe('SIGKILL mid-layer and --resume, end to end over TCP', () => {
  it('resumes from the journal’s state, keeps the layer’s shutter, loses and repeats nothing, completes, and replays the same', async () => {
    let killedAtS = 0;
    let garbled = false;
    const fault: FaultRun = await startFaultRun({
      seed: 41,
      transform: (line, view) => {
        // One line of junk in layer 2, so that the run has an alert from before the kill.
        if (!garbled && intoLayer(view, 2) >= 5 && parseReadingLine(line)?.c === 'o') {
          garbled = true;
          return 'OPT,junk';
        }
        if (killedAtS === 0 && intoLayer(view, 3) >= 20) {
          killedAtS = view.nowS;
          fault.run.child.kill('SIGKILL');
        }
        return line;
      },
    });
    cleanups.push(() => fault.close());
    expect(await fault.run.done, fault.run.out()).toBeNull();
    expect(fault.run.child.signalCode).toBe('SIGKILL');

    const runDir = join(fault.runsDir, readdirSync(fault.runsDir)[0] as string);
    const journalFile = join(runDir, 'journal.ndjson');
    const atKill = readFileSync(journalFile);
    const killed = readJournal(journalFile);
    const killedEvents = eventsOf(killed);
    // The state the journal holds: layers 1 and 2 finished, layer 3 growing, an alert raised.
    const replayAtKill = replayOf(killed);
    const s = replayAtKill.state;
    expect(replayAtKill.firstDifference, 'the killed run’s decisions replay the same').toBeNull();
    expect(s.index).toBe(2);
    expect(s.phase).toBe('depositing');
    const finishedAtKill = killedEvents.flatMap((e) => (e.type === 'layer-finished' ? [e] : []));
    expect(finishedAtKill.map((e) => e.layer)).toEqual([1, 2]);
    const cutsAtKill = killedEvents.flatMap((e) => (e.type === 'cut' ? [e] : []));
    const alertsAtKill = killedEvents.flatMap((e) => (e.type === 'alert' ? [e] : []));
    expect(alertsAtKill.length).toBeGreaterThan(0);
    const estimateAtKill = createController(recipe, { estimator: journalEstimator(killed.header), confirmCloses: true }).estimate(s);
    expect(estimateAtKill?.thicknessNm).toBeGreaterThan(0);

    // Nothing closed layer 3: its shutter stays open in the chamber, which goes on depositing.
    const served = await fault.server?.served;
    expect(shutterCommands(fault, 1)).not.toContain(`SHUTTER TiO2 CLOSE 3`);
    const whileDown = served?.chamber.truth();
    expect(whileDown?.sources.TiO2?.shutterOpen).toBe(true);
    expect(whileDown?.layers[2]?.growing).toBe(true);

    // Resume, with the dashboard: its view must be the journal's, not a blank one.
    const startedMs = performance.now();
    const resumed = fringe(['run', '--resume', runDir, '--serve', '--port', '0']);
    await waitFor(() => /dashboard: (http:\/\/\S+)/.test(resumed.out()) || resumed.child.exitCode !== null, 'the resumed run’s dashboard', 60_000);
    const dashboardMs = performance.now() - startedMs;
    expect(resumed.out()).toContain(`resuming ${runDir} at layer 3 (depositing), run time ${s.nowS.toFixed(1)} s`);
    const url = /dashboard: (http:\/\/\S+)/.exec(resumed.out())?.[1] as string;
    const snapshot = (await (await fetch(`${url}api/run/snapshot`)).json()) as RunSnapshot;
    // The dashboard names the estimator the run cuts with (it said the plain rules' words for a fit).
    expect(snapshot.estimator).toBe(journalEstimator(killed.header));
    for (const finished of finishedAtKill) {
      const row = snapshot.layers[finished.layer - 1];
      expect(row?.status, `layer ${finished.layer}`).toBe('past');
      expect(row?.cutReason, `layer ${finished.layer}'s cut`).toBe(cutsAtKill.find((c) => c.layer === finished.layer)?.reason);
      expect(row?.firstEstimatedNm, `layer ${finished.layer}'s thickness at its end`).toBeCloseTo(finished.estimatedNm, 3);
    }
    const loggedIds = new Set(snapshot.log.flatMap((l) => (l.event.type === 'alert' ? [l.event.id] : [])));
    for (const alert of alertsAtKill) expect(loggedIds.has(alert.id), `alert ${alert.id} (${alert.code}) from before the kill`).toBe(true);
    if (snapshot.status.layer === 3) {
      // Layer 3's trace reaches back to before the kill: the layer goes on, it does not start again.
      const firstPointS = snapshot.trace?.points[0]?.[0] ?? Number.POSITIVE_INFINITY;
      expect(firstPointS).toBeLessThan(killedAtS);
    }

    const code = await resumed.done;
    const wallS = (performance.now() - startedMs) / 1000;
    expect(code, resumed.out()).toBe(0);

    // Nothing already journalled is lost or rewritten: the journal at the kill is the new one's start.
    const after = readFileSync(journalFile);
    expect(after.subarray(0, atKill.length).equals(atKill)).toBe(true);
    const final = readJournal(journalFile);
    const tornAtKill = atKill.at(-1) !== 0x0a;
    expect(final.damagedLines).toBe(tornAtKill ? 1 : 0);
    const mark = final.records.findIndex((r) => r.k === 'm');
    expect(final.records[mark]).toMatchObject({ k: 'm', mark: 'resumed', t: s.nowS });
    expect(final.records.slice(0, mark)).toEqual(killed.records);

    // Nothing repeated: each layer started, cut and finished once; alert ids unique; no reading twice.
    const events = eventsOf(final);
    const layersOf = (type: RunEvent['type']): number[] => events.flatMap((e) => (e.type === type && 'layer' in e && typeof e.layer === 'number' ? [e.layer] : []));
    const all = recipe.layers.map((l) => l.number);
    expect(layersOf('layer-started')).toEqual(all);
    expect(layersOf('cut')).toEqual(all);
    expect(layersOf('layer-finished')).toEqual(all);
    const alertIds = events.flatMap((e) => (e.type === 'alert' ? [e.id] : []));
    expect(new Set(alertIds).size).toBe(alertIds.length);
    const readingKeys = final.records.flatMap((r) => (r.k === 'r' ? [`${r.c} ${r.t}`] : []));
    expect(new Set(readingKeys).size).toBe(readingKeys.length);

    // The shutter of layer 3: never opened again, closed once, by the layer's cut after the resume.
    const resumedCommands = shutterCommands(fault, 2);
    expect(resumedCommands.filter((c) => / OPEN [123]$/.test(c))).toEqual([]);
    expect(resumedCommands[0]).toBe('SHUTTER TiO2 CLOSE 3');
    const truth = served?.chamber.truth();
    expect(truth?.layers[2]).toMatchObject({ openings: 1, endedBy: 'close' });
    const layer3 = events.find((e): e is Extract<RunEvent, { type: 'layer-finished' }> => e.type === 'layer-finished' && e.layer === 3);
    expect(layer3?.estimatedNm).toBeGreaterThan(estimateAtKill?.thicknessNm ?? Number.POSITIVE_INFINITY);

    // Readings the killed process had been handed but not written: only a tail (what it held
    // unflushed; the design's bound is a second of wall time, which a loaded host stretches).
    const journalled = new Set(final.records.flatMap((r) => (r.k === 'r' ? [`${r.c} ${r.t} ${r.v}`] : [])));
    const handed = fault.relay.lines('toClient').flatMap((l) => l.sent.flatMap((line) => {
      const r = parseReadingLine(line.trim());
      return r ? [{ ...r, connection: l.connection, key: `${r.c} ${r.t} ${r.v}` }] : [];
    }));
    const lastJournalledS = Math.max(...killed.records.flatMap((r) => (r.k === 'r' ? [r.t] : [])));
    const first = handed.filter((r) => r.connection === 1);
    const firstLost = first.findIndex((r) => !journalled.has(r.key));
    const lostAtKill = first.slice(firstLost);
    expect(firstLost).toBeGreaterThan(0);
    expect(lostAtKill.filter((r) => journalled.has(r.key)), 'a reading journalled after one lost').toEqual([]);
    expect(Math.min(...lostAtKill.map((r) => r.t))).toBeGreaterThan(lastJournalledS);
    // Every reading the resumed process was handed, from the first it used to the run's end, is journalled.
    const second = handed.filter((r) => r.connection === 2);
    const firstRead = second.findIndex((r) => journalled.has(r.key));
    const lastRead = second.findLastIndex((r) => journalled.has(r.key));
    const missing = second.slice(firstRead, lastRead + 1).filter((r) => !journalled.has(r.key));
    expect(firstRead).toBeGreaterThanOrEqual(0);
    expect(missing).toEqual([]);

    // The whole journal replays with every decision as recorded, before and after the resume.
    const replay = replayOf(final);
    expect(replay.firstDifference).toBeNull();
    expect(replay.cuts.filter((c) => c.differs)).toEqual([]);
    const replayed = fringe(['replay', runDir, '--json']);
    expect(await replayed.done, replayed.out()).toBe(0);
    const json = JSON.parse(replayed.out().split('\n').find((l) => l.startsWith('{')) as string) as { differing: number; resumedAtS: number[] };
    expect(json.differing).toBe(0);
    expect(json.resumedAtS).toEqual([s.nowS]);

    console.log(
      `resume after SIGKILL: ${killed.records.length} records recovered (${killed.records.filter((r) => r.k === 'r').length} readings, ${killedEvents.length} events), ` +
        `${lostAtKill.length} readings handed to the killed process not journalled (${(killedAtS - lastJournalledS).toFixed(1)} s of run time at ${SPEED}×), ` +
        `torn last line: ${tornAtKill}; dashboard up ${(dashboardMs / 1000).toFixed(1)} s after the resume began; resumed run ${wallS.toFixed(1)} s to complete`,
    );
  }, 240_000);
});
