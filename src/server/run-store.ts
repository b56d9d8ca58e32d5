/**
 * The runs folder: `runs/<id>/` with `journal.ndjson` (first line the header), `summary.json`
 * once the run has ended, and `recipe.json` (the recipe as run). Read-only here; a folder name
 * is only ever used after it matched {@link RUN_ID_PATTERN}, and a folder is only read when its
 * real path (links followed) lies inside the runs folder's, so no request can leave the folder.
 */
import { closeSync, existsSync, openSync, readdirSync, readFileSync, readSync, realpathSync, statSync } from 'node:fs';
import { join, resolve, sep } from 'node:path';
import { headerProblem, parseRecord, unsealLine, type JournalHeader } from '../journal/journal-format.ts';
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
  /** The chamber's factors from `calibration.json` beside the run (`fringe calibrate`), one line; null without one. */
  calibration: string | null;
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
    const line = text.slice(0, end);
    const header = parseRecord(unsealLine(line)?.body ?? line);
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

/**
 * The calibration beside a run in one line, per material its index factor, chip ratio and
 * tooling factor with their sigmas ("SiO2: n ×1.0100 ± 0.0001, chip 1.0068 ± 0.0015, tooling
 * 1.0538 ± 0.0015"); null without a readable calibration.json. Only numbers are taken from it.
 */
export function calibrationBrief(folder: RunFolder): string | null {
  let value: unknown;
  try {
    value = JSON.parse(readFileSync(join(folder.dir, 'calibration.json'), 'utf8'));
  } catch {
    return null;
  }
  const materials = (value as { materials?: unknown } | null)?.materials;
  if (materials === null || typeof materials !== 'object' || Array.isArray(materials)) return null;
  const figure = (f: unknown): string | null => {
    const { value: v, sigma } = (f ?? {}) as { value?: unknown; sigma?: unknown };
    return typeof v === 'number' && Number.isFinite(v) ? `${v.toFixed(4)}${typeof sigma === 'number' && Number.isFinite(sigma) ? ` ± ${sigma.toFixed(4)}` : ''}` : null;
  };
  const parts = Object.entries(materials as Record<string, unknown>).slice(0, 20).map(([name, m]) => {
    const { indexFactor, chipRatio, toolingFactor } = (m ?? {}) as Record<string, unknown>;
    const each = [['n ×', indexFactor], ['chip ', chipRatio], ['tooling ', toolingFactor]]
      .map(([label, f]) => [label, figure(f)])
      .filter(([, text]) => text !== null)
      .map(([label, text]) => `${label as string}${text as string}`);
    return `${name.slice(0, 40)}: ${each.join(', ') || 'no figures'}`;
  });
  return parts.length > 0 ? parts.join('; ') : null;
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
      calibration: calibrationBrief(folder),
    });
  }
  return out.sort((a, b) => (b.startedAt ?? b.id).localeCompare(a.startedAt ?? a.id));
}
