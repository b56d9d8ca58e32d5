/**
 * The demo's own runs, and only those, kept to the last few: every `npm start` records a run of
 * megabytes, and a runs folder is where real runs live too. A run is the demo's when its journal
 * header says so (`meta.demo: true`, written by `fringe demo` alone); a run whose header cannot
 * be read, or says anything else, is never touched.
 */
import { rmSync } from 'node:fs';
import { listRuns, readJournalHeader, runFolder } from '../server/run-store.ts';

/** Demo runs kept by default, the one about to start included. */
export const DEMO_RUNS_KEPT = 5;

/** Removes the oldest demo runs so that `keep` remain; returns the ids removed. */
export function pruneDemoRuns(runsDir: string, keep: number): string[] {
  const demoRuns = listRuns(runsDir).filter((run) => {
    const folder = runFolder(runsDir, run.id);
    return folder !== null && readJournalHeader(folder.journalFile)?.meta.demo === true;
  });
  // listRuns is newest first.
  const removed: string[] = [];
  for (const run of demoRuns.slice(Math.max(0, keep))) {
    const folder = runFolder(runsDir, run.id);
    if (!folder) continue;
    rmSync(folder.dir, { recursive: true, force: true });
    removed.push(run.id);
  }
  return removed;
}
