/**
 * `withTicks(periodMs, now, scheduler)`: passes inputs through and adds a `tick` at run time
 * `now()` whenever `periodMs` pass with neither an input nor a tick, so that the controller
 * notices silence. The period may be a function, read at each arming (a run clock faster than
 * the host's wants shorter periods). The scheduler is injected: tests run it on virtual time.
 *
 * `yieldToInput` (real time only, e.g. `setImmediate`) lets a due tick wait for input already
 * waiting: after the host stalls, Node runs due timers before it reads the lines that came in
 * meanwhile, and a tick first would move the run clock past those readings (refused as jumps,
 * or taken as silence). A tick that an input overtook is dropped.
 */
import { asyncScheduler, Observable, type OperatorFunction, type SchedulerLike, type Subscription } from 'rxjs';
import type { PipelineInput } from '../types.ts';

export function withTicks(
  periodMs: number | (() => number),
  now: () => number,
  scheduler: SchedulerLike = asyncScheduler,
  yieldToInput?: (fire: () => void) => void,
): OperatorFunction<PipelineInput, PipelineInput> {
  const period = typeof periodMs === 'function' ? periodMs : (): number => periodMs;
  return (source) =>
    new Observable<PipelineInput>((subscriber) => {
      let timer: Subscription | undefined;
      let armings = 0;
      const arm = (): void => {
        timer?.unsubscribe();
        armings += 1;
        // A subscriber that has ended (downstream failed on the last input or tick) gets no more ticks.
        if (subscriber.closed) return;
        const armed = armings;
        const tick = (): void => {
          if (armed !== armings || subscriber.closed) return;
          let timeS: number;
          try {
            timeS = now();
          } catch (error) {
            subscriber.error(error);
            return;
          }
          subscriber.next({ kind: 'tick', timeS });
          arm();
        };
        timer = scheduler.schedule(() => (yieldToInput ? yieldToInput(tick) : tick()), period());
      };
      arm();
      const inner = source.subscribe({
        next(input) {
          subscriber.next(input);
          arm();
        },
        error: (error: unknown) => subscriber.error(error),
        complete: () => subscriber.complete(),
      });
      return () => {
        armings += 1;
        timer?.unsubscribe();
        inner.unsubscribe();
      };
    });
}
