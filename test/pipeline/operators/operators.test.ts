// The pipeline's operators on virtual time: no values, one, many, a source error, a never-ending
// source, early unsubscribe, and a throwing callback.
import { createServer, connect, type AddressInfo, type Socket } from 'node:net';
import { fileURLToPath } from 'node:url';
import { asyncScheduler, concatWith, from, NEVER, of, Subject, throwError, VirtualTimeScheduler, type Observable } from 'rxjs';
import { TestScheduler } from 'rxjs/testing';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { createController } from '../../../src/pipeline/controller.ts';
import { decide, toRunClock, withTicks, type Decision } from '../../../src/pipeline/operators/index.ts';
import type { PipelineInput } from '../../../src/pipeline/types.ts';

const recipe = loadRecipe(fileURLToPath(new URL('../../../config/recipes/ar4-visible.yaml', import.meta.url)));
const controller = createController(recipe, { replan: false });
const start: PipelineInput = { kind: 'operator', action: 'start', timeS: 0 };
const reading = (timeS: number, value = 0.9): PipelineInput => ({ kind: 'reading', channel: 'optical', value, timeS, arrivalS: timeS });

function collect<T>(source: Observable<T>): { values: T[]; error: unknown; completed: boolean } {
  const out = { values: [] as T[], error: undefined as unknown, completed: false };
  source.subscribe({ next: (v) => out.values.push(v), error: (e: unknown) => (out.error = e), complete: () => (out.completed = true) });
  return out;
}

describe('decide', () => {
  it('emits nothing for no input and completes', () => {
    const r = collect(from<PipelineInput[]>([]).pipe(decide(controller)));
    expect(r.values).toEqual([]);
    expect(r.completed).toBe(true);
  });

  it('emits one decision per input with the reducer’s events, state carried over', () => {
    const r = collect(of(start, reading(1), reading(2)).pipe(decide(controller)));
    expect(r.values).toHaveLength(3);
    expect(r.values[0]?.events.map((e) => e.type)).toEqual(['run-started', 'layer-started', 'shutter']);
    expect(r.values[2]?.state.nowS).toBe(2);
    expect(r.values[2]?.state.lastOpticalS).toBe(2);
  });

  it('keeps state per subscription', () => {
    const source = of(start, reading(1));
    const a = collect(source.pipe(decide(controller)));
    const b = collect(source.pipe(decide(controller)));
    expect(JSON.stringify(a.values)).toBe(JSON.stringify(b.values));
  });

  it('passes a source error on', () => {
    const r = collect(throwError(() => new Error('port gone')).pipe(decide(controller)));
    expect((r.error as Error).message).toBe('port gone');
  });

  it('lives with a never-ending source and stops on unsubscribe', () => {
    const subject = new Subject<PipelineInput>();
    const values: Decision[] = [];
    const sub = subject.pipe(decide(controller)).subscribe((d) => values.push(d));
    subject.next(start);
    sub.unsubscribe();
    subject.next(reading(1));
    expect(values).toHaveLength(1);
    expect(subject.observed).toBe(false);
    expect(collect(NEVER.pipe(decide(controller))).completed).toBe(false);
  });

  it('turns a throwing reducer into an error, not an exception in the source', () => {
    const broken = { ...controller, step: () => { throw new Error('reducer bug'); } };
    const r = collect(of(start).pipe(decide(broken)));
    expect((r.error as Error).message).toBe('reducer bug');
  });
});

describe('toRunClock', () => {
  it('puts readings on the arrival clock or keeps the instrument’s', () => {
    const input: PipelineInput = { kind: 'reading', channel: 'crystal', value: 6e6, timeS: 500, arrivalS: 1010 };
    expect(collect(of(input).pipe(toRunClock('arrival', 1000))).values[0]).toMatchObject({ timeS: 10, arrivalS: 10 });
    expect(collect(of(input).pipe(toRunClock('instrument', 1000, 490))).values[0]).toMatchObject({ timeS: 10, arrivalS: 10 });
    expect(collect(of(start).pipe(toRunClock('arrival', 1000))).values[0]).toEqual(start);
  });
});

describe('withTicks (virtual time)', () => {
  const scheduler = () => new TestScheduler((a, b) => expect(a).toEqual(b));

  it('ticks through silence and not while inputs flow; ends with its source', () => {
    scheduler().run(({ cold, expectObservable }) => {
      // a at 0, b at 500 ms, the end at 3 s: ticks 1 s after b and 1 s after that tick.
      const source = cold<PipelineInput>('a 499ms b 2499ms |', { a: reading(0), b: reading(1) });
      let t = 0;
      const ticked = source.pipe(withTicks(1000, () => (t += 1)));
      expectObservable(ticked).toBe('a 499ms b 999ms t 999ms u 499ms |', {
        a: reading(0),
        b: reading(1),
        t: { kind: 'tick', timeS: 1 },
        u: { kind: 'tick', timeS: 2 },
      });
    });
  });

  it('passes an error on, stops ticking on unsubscribe, and reports a throwing clock', () => {
    scheduler().run(({ cold, expectObservable }) => {
      expectObservable(cold<PipelineInput>('--#').pipe(withTicks(1000, () => 0))).toBe('--#');
      expectObservable(cold<PipelineInput>('-').pipe(withTicks(10, () => 0)), '^ 25ms !').toBe('10ms t 9ms t', { t: { kind: 'tick', timeS: 0 } });
      expectObservable(
        cold<PipelineInput>('-').pipe(
          withTicks(10, () => {
            throw new Error('clock');
          }),
        ),
      ).toBe('10ms #', undefined, new Error('clock'));
    });
  });

  it('arms no more ticks once downstream has failed on an input or on a tick', () => {
    const throwing = { ...controller, step: (): never => {
      throw new Error('the reducer failed');
    } };
    // Failing on the first input, and (no input at all) on the first tick.
    for (const source of [of(start).pipe(concatWith(NEVER)), NEVER]) {
      const virtual = new VirtualTimeScheduler(undefined, 1000);
      const out = collect(source.pipe(withTicks(10, () => 1, virtual), decide(throwing)));
      virtual.flush();
      expect((out.error as Error).message).toBe('the reducer failed');
      // Nothing is left scheduled: a live process would otherwise never exit.
      expect(virtual.actions).toHaveLength(0);
    }
  });
});

describe('withTicks (the real event loop)', () => {
  it('lets a due tick wait for a line that came in while the host stalled, and drops it', async () => {
    // Node runs due timers before it reads sockets: after a stall, a tick would come before the
    // reading already waiting (and move the run clock past it). The order is the loop's phases',
    // not a race: the line is in the socket before the stall ends, the timer is due by then.
    const server = createServer();
    await new Promise<void>((done) => server.listen(0, '127.0.0.1', done));
    const { port } = server.address() as AddressInfo;
    const accepted = new Promise<Socket>((done) => server.once('connection', done));
    const writer = connect(port, '127.0.0.1');
    await new Promise<void>((done) => writer.once('connect', done));
    const reader = await accepted;
    try {
      for (const yieldToInput of [setImmediate, undefined]) {
        const lines = new Subject<PipelineInput>();
        const onData = (): void => lines.next(reading(1));
        reader.on('data', onData);
        const seen: string[] = [];
        const sub = lines.pipe(withTicks(20, () => 2, asyncScheduler, yieldToInput)).subscribe((input) => seen.push(input.kind));
        writer.write('x');
        const until = Date.now() + 80;
        while (Date.now() < until); // the host stalls past the tick's period
        await new Promise((done) => setTimeout(done, 5));
        sub.unsubscribe();
        reader.off('data', onData);
        expect(seen[0], String(yieldToInput?.name)).toBe(yieldToInput ? 'reading' : 'tick');
      }
    } finally {
      writer.destroy();
      reader.destroy();
      server.close();
    }
  });
});

