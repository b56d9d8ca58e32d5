// A real MQTT broker for the tests: Debian's mosquitto on a free port of 127.0.0.1, with a
// temporary configuration (and, when asked, a password file and persistence so that a
// subscriber's session survives a restart). `stop()` ends it as an operator would (SIGTERM:
// it saves its sessions); `start()` brings it back on the same port.
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { existsSync, mkdtempSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir, userInfo } from 'node:os';
import { join } from 'node:path';

export const MOSQUITTO = '/usr/sbin/mosquitto';
export const haveMosquitto = existsSync(MOSQUITTO);
export const inCi = process.env.CI === 'true';

export interface TestBroker {
  readonly port: number;
  readonly url: string;
  /** Lines mosquitto logged, oldest first. */
  readonly log: string[];
  start(): Promise<void>;
  stop(): Promise<void>;
}

export interface TestBrokerOptions {
  /** Users and passwords: anonymous clients are then refused. */
  users?: Record<string, string>;
  /** Keep sessions and queued messages across a restart. */
  persistent?: boolean;
}

export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const server = createServer();
    server.once('error', reject);
    server.listen(0, '127.0.0.1', () => {
      const address = server.address();
      server.close(() => resolve(typeof address === 'object' && address ? address.port : 0));
    });
  });
}

export async function startTestBroker(options: TestBrokerOptions = {}): Promise<TestBroker> {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-broker-'));
  const port = await freePort();
  const lines = [`listener ${port} 127.0.0.1`, 'log_dest stderr', 'log_type all', `user ${userInfo().username}`];
  if (options.users) {
    const passwords = join(dir, 'passwords');
    writeFileSync(passwords, '');
    for (const [user, password] of Object.entries(options.users)) {
      const made = spawnSync('/usr/bin/mosquitto_passwd', ['-b', passwords, user, password]);
      if (made.status !== 0) throw new Error(`mosquitto_passwd failed: ${made.stderr.toString()}`);
    }
    lines.push('allow_anonymous false', `password_file ${passwords}`);
  } else lines.push('allow_anonymous true');
  if (options.persistent) lines.push('persistence true', `persistence_location ${dir}/`);
  const config = join(dir, 'mosquitto.conf');
  writeFileSync(config, `${lines.join('\n')}\n`);

  const log: string[] = [];
  let child: ChildProcess | undefined;
  const broker: TestBroker = {
    port,
    url: `mqtt://127.0.0.1:${port}`,
    log,
    start: () =>
      new Promise<void>((resolve, reject) => {
        const proc = spawn(MOSQUITTO, ['-c', config], { stdio: ['ignore', 'ignore', 'pipe'] });
        child = proc;
        let buffered = '';
        proc.stderr?.setEncoding('utf8');
        proc.stderr?.on('data', (chunk: string) => {
          buffered += chunk;
          const parts = buffered.split('\n');
          buffered = parts.pop() ?? '';
          for (const line of parts) {
            log.push(line);
            if (/ running$/.test(line)) resolve();
          }
        });
        proc.once('exit', (code) => reject(new Error(`mosquitto exited (${code}) before it was running: ${log.slice(-3).join(' | ')}`)));
        proc.once('error', reject);
      }),
    stop: () =>
      new Promise<void>((resolve) => {
        const proc = child;
        if (!proc || proc.exitCode !== null) return resolve();
        proc.once('exit', () => resolve());
        proc.kill('SIGTERM');
      }),
  };
  await broker.start();
  return broker;
}

/**
 * Waits until `check()` holds, looking again every 20 ms: the tests wait on what the broker
 * and the clients do, with a bound generous enough for a loaded machine.
 */
export async function until(check: () => boolean, what: string, timeoutMs = 60_000): Promise<void> {
  const end = Date.now() + timeoutMs;
  while (!check()) {
    if (Date.now() > end) throw new Error(`waited ${timeoutMs / 1000} s for ${what}`);
    await new Promise((r) => setTimeout(r, 20));
  }
}
