/**
 * `withTicks(periodMs, now, scheduler)`: passes inputs through and adds a `tick` at run time
 * `now()` whenever `periodMs` pass with neither an input nor a tick, so that the controller
 * notices silence. The period may be a function, read at each arming (a run clock faster than
 * the host's wants shorter periods). The scheduler is injected: tests run it on virtual time.
 */
import { asyncScheduler, Observable, type OperatorFunction, type SchedulerLike, type Subscription } from 'rxjs';
import type { PipelineInput } from '../types.ts';

export function withTicks(periodMs: number | (() => number), now: () => number, scheduler: SchedulerLike = asyncScheduler): OperatorFunction<PipelineInput, PipelineInput> {
  const period = typeof periodMs === 'function' ? periodMs : (): number => periodMs;
  return (source) =>
    new Observable<PipelineInput>((subscriber) => {
      let timer: Subscription | undefined;
      const arm = (): void => {
        timer?.unsubscribe();
        // A subscriber that has ended (downstream failed on the last input or tick) gets no more ticks.
        if (subscriber.closed) return;
        timer = scheduler.schedule(() => {
          let timeS: number;
          try {
            timeS = now();
          } catch (error) {
            subscriber.error(error);
            return;
          }
          subscriber.next({ kind: 'tick', timeS });
          arm();
        }, period());
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
        timer?.unsubscribe();
        inner.unsubscribe();
      };
    });
}
