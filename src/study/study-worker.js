// A study worker thread's entry: registers tsx in this thread, then runs the TypeScript worker.
import { register } from 'tsx/esm/api';

register();
await import('./study-worker-main.ts');
