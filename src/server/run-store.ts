/**
 * The runs folder: `runs/<id>/` with `journal.ndjson` (first line the header), `summary.json`
 * once the run has ended, and `recipe.json` (the recipe as run). Read-only here; a folder name
 * is only ever used after it matched {@link RUN_ID_PATTERN}, and a folder is only read when its
 * real path (links followed) lies inside the runs folder's, so no request can leave the folder.
 */
import { closeSync, existsSync, openSync, readdirSync, readFileSync, readSync, realpathSync, statSync } from 'node:fs';
import { join, resolve, sep } from 'node:path';
import { headerProblem, parseRecord, type JournalHeader } from '../journal/journal-format.ts';
import { runFigures } from './run-summary.ts';

/** Run ids are folder names: letters, digits, dot, dash and underscore, not starting with a dot. */
export const RUN_ID_PATTERN = '^[A-Za-z0-9][A-Za-z0-9._-]{0,127}$';
const RUN_ID = new RegExp(RUN_ID_PATTERN);

export interface RunListing {
  id: string;
  recipe: string | null;
  startedAt: string | null;
  source: string | null;
  /** From the summary; `in progress` while the run has none. */
  outcome: string;
  /** Layers deposited, wholly or in part (null without a summary). */
  layers: number | null;
  /** Layers the recipe has (null without a summary). */
  layersPlanned: number | null;
  /** Layers a rule cut: the rms errors are over these (null without a summary). */
  layersCutByRule: number | null;
  durationS: number | null;
  /** Root-mean-square of the estimated errors of the layers a rule cut, % (null without a summary). */
  rmsErrorPercent: number | null;
  /** Simulated runs: root-mean-square of the same layers' true errors, % (null otherwise). */
  rmsTrueErrorPercent: number | null;
  journalBytes: number;
  replayable: boolean;
}

export interface RunFolder {
  id: string;
  dir: string;
  journalFile: string;
  summaryFile: string;
  recipeFile: string;
}

/** The folder of run `id` when it exists and holds a journal, else null. */
export function runFolder(runsDir: string, id: string): RunFolder | null {
  if (!RUN_ID.test(id)) return null;
  const root = realPath(resolve(runsDir));
  const dir = root === null ? null : realPath(join(root, id));
  // A link to a folder elsewhere is not a run of this folder.
  if (root === null || dir === null || !dir.startsWith(root + sep)) return null;
  const journalFile = join(dir, 'journal.ndjson');
  if (!existsSync(journalFile) || realPath(journalFile) !== journalFile) return null;
  return { id, dir, journalFile, summaryFile: join(dir, 'summary.json'), recipeFile: join(dir, 'recipe.json') };
}

/** The path with every link resolved, or null when it does not exist. */
function realPath(path: string): string | null {
  try {
    return realpathSync(path);
  } catch {
    return null;
  }
}

/** The journal's first line, read without loading the file; null unless it is a header this fringe reads. */
export function readJournalHeader(file: string): JournalHeader | null {
  let fd: number | undefined;
  try {
    fd = openSync(file, 'r');
    const buffer = Buffer.alloc(16384);
    const n = readSync(fd, buffer, 0, buffer.length, 0);
    const text = buffer.subarray(0, n).toString('utf8');
    const end = text.indexOf('\n');
    if (end < 0) return null;
    const header = parseRecord(text.slice(0, end));
    // A damaged header (no meta, say) must not break the listing of the others.
    return headerProblem(header) === null ? (header as JournalHeader) : null;
  } catch {
    return null;
  } finally {
    if (fd !== undefined) closeSync(fd);
  }
}

export function readSummary(folder: RunFolder): Record<string, unknown> | null {
  try {
    const value = JSON.parse(readFileSync(folder.summaryFile, 'utf8')) as unknown;
    return value !== null && typeof value === 'object' && !Array.isArray(value) ? (value as Record<string, unknown>) : null;
  } catch {
    return null;
  }
}

/** Every run in `runsDir`, newest first. A missing folder is an empty list. */
export function listRuns(runsDir: string): RunListing[] {
  let names: string[];
  try {
    names = readdirSync(runsDir);
  } catch {
    return [];
  }
  const out: RunListing[] = [];
  for (const name of names) {
    const folder = runFolder(runsDir, name);
    if (!folder) continue;
    const header = readJournalHeader(folder.journalFile);
    const summary = readSummary(folder);
    // Figures from the layers themselves, so that an older summary reads the same way.
    const layers = Array.isArray(summary?.layers) ? (summary.layers as unknown[]).filter((l): l is Record<string, unknown> => l !== null && typeof l === 'object') : null;
    const figures = layers ? runFigures(layers) : null;
    out.push({
      id: name,
      recipe: typeof summary?.recipe === 'string' ? summary.recipe : (header?.recipe ?? null),
      startedAt: header?.startedAt ?? null,
      source: typeof header?.meta.source === 'string' ? header.meta.source : null,
      outcome: typeof summary?.outcome === 'string' ? summary.outcome : 'in progress',
      layers: figures?.layersDeposited ?? null,
      layersPlanned: figures?.layersPlanned ?? null,
      layersCutByRule: figures?.layersCutByRule ?? null,
      durationS: typeof summary?.durationS === 'number' ? summary.durationS : null,
      rmsErrorPercent: figures?.rmsErrorPercent ?? null,
      rmsTrueErrorPercent: figures?.rmsTrueErrorPercent ?? null,
      journalBytes: statSync(folder.journalFile).size,
      replayable: existsSync(folder.recipeFile),
    });
  }
  return out.sort((a, b) => (b.startedAt ?? b.id).localeCompare(a.startedAt ?? a.id));
}
