/** Makes one run's report page off the server's thread and posts it back. */
import { parentPort, workerData } from 'node:worker_threads';
import { collectRunReport } from './run-report.ts';
import { renderRunReport } from './run-report-page.ts';

const { dir, id } = workerData as { dir: string; id: string };
try {
  parentPort?.postMessage({ ok: true, page: renderRunReport(collectRunReport(dir, id)) });
} catch (error) {
  parentPort?.postMessage({ ok: false, message: error instanceof Error ? error.message : String(error) });
}
