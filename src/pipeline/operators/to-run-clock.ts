/**
 * `toRunClock(clock)`: puts every input on one run clock, seconds since the run began.
 * `arrival`: the host's monotonic arrival time (one clock for instruments whose own clocks
 * differ); `instrument`: the readings' own timestamps, taken as already sharing one origin (the
 * virtual chamber, or instruments synchronised by the site), less `startInstrumentS`.
 */
import { map, type OperatorFunction } from 'rxjs';
import type { PipelineInput } from '../types.ts';

export type RunClock = 'arrival' | 'instrument';

export function toRunClock(clock: RunClock, startArrivalS: number, startInstrumentS = 0): OperatorFunction<PipelineInput, PipelineInput> {
  return map((input) => {
    switch (input.kind) {
      case 'reading':
      case 'spectrum': {
        const arrivalS = input.arrivalS - startArrivalS;
        return { ...input, arrivalS, timeS: clock === 'arrival' ? arrivalS : input.timeS - startInstrumentS };
      }
      case 'fault':
        return { ...input, arrivalS: input.arrivalS - startArrivalS };
      default:
        return input;
    }
  });
}
