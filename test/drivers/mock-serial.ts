// A recording wrapper around @serialport/binding-mock's MockBinding: it keeps every port it
// opened (so a test can emit data on it and read what was written), can refuse the next opens
// (a device not plugged in) and can unplug an open port (its pending read fails the way a
// vanished USB adapter's does, so serialport reports a disconnect).
import { createRequire } from 'node:module';
// The package's `exports` map gives ESM importers no types, so the CommonJS build is loaded
// (the same instance `serialport` itself uses) and typed from its declarations.
import type { MockBindingInterface, MockPortBinding } from '@serialport/binding-mock' with { 'resolution-mode': 'require' };

export const { MockBinding } = createRequire(import.meta.url)('@serialport/binding-mock') as { MockBinding: MockBindingInterface };

type ReadResult = Awaited<ReturnType<MockPortBinding['read']>>;

export class UnpluggablePort {
  private unplugged: Error | undefined;
  private failRead: ((error: Error) => void) | undefined;

  constructor(readonly inner: MockPortBinding) {}

  get openOptions(): MockPortBinding['openOptions'] {
    return this.inner.openOptions;
  }
  get isOpen(): boolean {
    return this.inner.isOpen;
  }
  /** Every byte written to the port (the mock port is created with `record: true`). */
  get recording(): Buffer {
    return this.inner.recording;
  }
  /** The instrument sends bytes. */
  emitData(data: Buffer | string): void {
    this.inner.emitData(data);
  }
  /** The device goes away: the pending read fails with an error that is not a cancellation. */
  unplug(message = 'device unplugged'): void {
    this.unplugged = new Error(message);
    this.failRead?.(this.unplugged);
  }
  read(buffer: Buffer, offset: number, length: number): Promise<ReadResult> {
    if (this.unplugged) return Promise.reject(this.unplugged);
    return new Promise<ReadResult>((resolve, reject) => {
      this.failRead = reject;
      this.inner.read(buffer, offset, length).then(resolve, reject);
    });
  }
  write(buffer: Buffer): Promise<void> {
    return this.unplugged ? Promise.reject(this.unplugged) : this.inner.write(buffer);
  }
  close(): Promise<void> {
    return this.inner.close();
  }
  update(options: Parameters<MockPortBinding['update']>[0]): Promise<void> {
    return this.inner.update(options);
  }
  set(options: Parameters<MockPortBinding['set']>[0]): Promise<void> {
    return this.inner.set(options);
  }
  get(): ReturnType<MockPortBinding['get']> {
    return this.inner.get();
  }
  getBaudRate(): Promise<{ baudRate: number }> {
    return this.inner.getBaudRate();
  }
  flush(): Promise<void> {
    return this.inner.flush();
  }
  drain(): Promise<void> {
    return this.inner.drain();
  }
}

export interface MockSerial {
  /** Pass as the serial transport's `binding`. */
  readonly binding: { list(): Promise<unknown[]>; open(options: Parameters<typeof MockBinding.open>[0]): Promise<UnpluggablePort> };
  /** Every port opened, oldest first. */
  readonly opened: UnpluggablePort[];
  /** `Date.now()` at every open attempt, refused or not. */
  readonly attempts: number[];
  /** The most recently opened port (on `path`, when given). */
  last(path?: string): UnpluggablePort;
  /** Refuse the next `count` opens. */
  refuseOpens(count: number): void;
}

/** Resets MockBinding and creates the given ports. */
export function createMockSerial(...paths: string[]): MockSerial {
  MockBinding.reset();
  for (const path of paths.length > 0 ? paths : ['/dev/ROBOT']) MockBinding.createPort(path, { echo: false, record: true });
  const opened: UnpluggablePort[] = [];
  const attempts: number[] = [];
  let refuse = 0;
  return {
    opened,
    attempts,
    binding: {
      list: () => MockBinding.list(),
      async open(options) {
        attempts.push(Date.now());
        if (refuse > 0) {
          refuse -= 1;
          throw new Error(`cannot open ${options.path}: no such device`);
        }
        const port = new UnpluggablePort(await MockBinding.open(options));
        opened.push(port);
        return port;
      },
    },
    last(path) {
      const port = opened.filter((p) => path === undefined || p.openOptions.path === path).at(-1);
      if (!port) throw new Error('no port opened yet');
      return port;
    },
    refuseOpens(count) {
      refuse = count;
    },
  };
}

/** Lets promise callbacks and `process.nextTick` work run (setImmediate is never faked here). */
export async function settle(rounds = 10): Promise<void> {
  for (let i = 0; i < rounds; i++) await new Promise<void>((resolve) => setImmediate(resolve));
}

/** Settles until `condition` holds; fails the test after `rounds`. */
export async function until(condition: () => boolean, what: string, rounds = 500): Promise<void> {
  for (let i = 0; i < rounds; i++) {
    if (condition()) return;
    await new Promise<void>((resolve) => setImmediate(resolve));
  }
  throw new Error(`timed out waiting for ${what}`);
}
