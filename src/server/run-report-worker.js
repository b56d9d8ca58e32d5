// A run report's worker thread: registers tsx in this thread, then makes the report in TypeScript.
import { register } from 'tsx/esm/api';

register();
await import('./run-report-worker-main.ts');
