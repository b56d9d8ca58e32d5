/**
 * Journals copied from several chambers into one folder, as one history: `DIR/<run>/` for runs
 * kept there directly, `DIR/<chamber>/<run>/` for each chamber's runs folder. A run's chamber is
 * the one its journal names (a live run records it), else its folder's name.
 */
import { readdirSync } from 'node:fs';
import { join } from 'node:path';
import { listRuns, readJournalHeader, runFolder } from '../server/run-store.ts';
import type { FloorRun } from './floor-state.ts';
import { topicLevel } from './plant-settings.ts';

/** Every run under `dir`, newest first. Unreadable folders and journals are left out, not fatal. */
export function indexRuns(dir: string): FloorRun[] {
  const runs: FloorRun[] = [...runsIn(dir, null)];
  let names: string[] = [];
  try {
    names = readdirSync(dir, { withFileTypes: true })
      .filter((d) => d.isDirectory() && runFolder(dir, d.name) === null)
      .map((d) => d.name);
  } catch {
    // A folder that cannot be read lists nothing; the command line checked it exists.
  }
  for (const name of names) runs.push(...runsIn(join(dir, name), name));
  return runs.sort((a, b) => (b.startedAt ?? '').localeCompare(a.startedAt ?? ''));
}

function runsIn(runsDir: string, folderName: string | null): FloorRun[] {
  return listRuns(runsDir).map((listing) => {
    const folder = runFolder(runsDir, listing.id);
    const named = folder ? readJournalHeader(folder.journalFile)?.meta.chamber : undefined;
    const chamber = typeof named === 'string' && named !== '' ? named : (folderName ?? 'unnamed');
    return {
      chamber: topicLevel(chamber),
      runId: listing.id,
      recipe: listing.recipe,
      startedAt: listing.startedAt,
      outcome: listing.outcome,
      layers: listing.layers,
      durationS: listing.durationS,
      rmsErrorPercent: listing.rmsErrorPercent,
    };
  });
}
