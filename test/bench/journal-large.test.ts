// Opt-in (FRINGE_BIG_JOURNAL=1, about a minute and 600 MB of temp disk): a journal over 512 MiB —
// more than one JavaScript string can hold — read back whole as a stream, and replayed.
import { mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { openJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';

describe.runIf(process.env.FRINGE_BIG_JOURNAL === '1')('a journal over 512 MiB', () => {
  it('is read to its end as a stream, every record once, in bounded memory', () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-big-journal-'));
    try {
      const w = createJournalWriter(dir, { runId: 'big', startedAt: '2026-12-01T00:00:00.000Z', recipe: 'r', meta: {} });
      const n = 9_000_000;
      for (let i = 0; i < n; i++) w.input({ kind: 'reading', channel: i % 2 ? 'optical' : 'crystal', value: 0.5 + i * 1e-9, timeS: i / 1000, arrivalS: i / 1000 + 0.0003 });
      w.close();
      const bytes = statSync(w.file).size;
      expect(bytes).toBeGreaterThan(512 * 2 ** 20);
      const start = performance.now();
      let count = 0;
      let lastT = -1;
      for (const r of openJournal(w.file).records) {
        if (r.k === 'r' && r.t > lastT) lastT = r.t;
        count++;
      }
      const seconds = (performance.now() - start) / 1000;
      console.log(`read ${(bytes / 2 ** 20).toFixed(0)} MiB, ${count} records in ${seconds.toFixed(1)} s (${(bytes / 2 ** 20 / seconds).toFixed(0)} MiB/s), rss ${(process.memoryUsage().rss / 2 ** 20).toFixed(0)} MiB`);
      expect(count).toBe(n);
      expect(lastT).toBe((n - 1) / 1000);
      expect(process.memoryUsage().rss).toBeLessThan(bytes);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  }, 600_000);
});
