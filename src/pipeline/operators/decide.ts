/**
 * `decide(controller)`: the controller's pure reducer as a stream operator. Each input yields one
 * `Decision` (the input, the state after it and the events it caused); state lives in the
 * subscription's closure, so two subscriptions decide independently.
 */
import { Observable, type OperatorFunction } from 'rxjs';
import type { Controller, ControllerState } from '../controller.ts';
import type { RunEvent } from '../events.ts';
import type { PipelineInput } from '../types.ts';

export interface Decision {
  readonly input: PipelineInput;
  readonly state: ControllerState;
  readonly events: readonly RunEvent[];
}

export function decide(controller: Controller, initial?: ControllerState): OperatorFunction<PipelineInput, Decision> {
  return (source) =>
    new Observable<Decision>((subscriber) => {
      let state = initial ?? controller.initial();
      return source.subscribe({
        next(input) {
          let result;
          try {
            result = controller.step(state, input);
          } catch (error) {
            subscriber.error(error);
            return;
          }
          state = result.state;
          subscriber.next({ input, state, events: result.events });
        },
        error: (error: unknown) => subscriber.error(error),
        complete: () => subscriber.complete(),
      });
    });
}
