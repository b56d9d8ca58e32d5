export { decide, type Decision } from './decide.ts';
export { toRunClock, type RunClock } from './to-run-clock.ts';
export { withTicks } from './with-ticks.ts';
