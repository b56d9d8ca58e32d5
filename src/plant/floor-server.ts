/**
 * The floor page's server: read-only. `GET /api/floor` is every chamber as the broker (and the
 * journals on disk) tell it, `GET /api/floor/history` every run on disk; there is no route that
 * changes anything. It answers only to the names the dashboard answers to, with the same
 * security headers (no inline script, never framed); bound beyond this machine, the API needs
 * the viewer token.
 */
import { fileURLToPath } from 'node:url';
import fastifyStatic from '@fastify/static';
import Fastify, { type FastifyInstance } from 'fastify';
import { isLoopback, mayView } from '../server/auth.ts';
import { SECURITY_HEADERS } from '../server/build-server.ts';
import { createHostRule, splitTarget } from '../server/host-rule.ts';
import type { FloorRun, FloorView } from './floor-state.ts';

export const FLOOR_PUBLIC_DIR = fileURLToPath(new URL('./public/', import.meta.url));

export interface FloorSource {
  view(): FloorView;
  /** Every run on disk, newest first (empty without a runs folder). */
  history(): FloorRun[];
}

export interface FloorServerOptions {
  host: string;
  allowedHosts?: readonly string[];
  /** Required to view when bound beyond this machine. */
  viewerToken?: string | undefined;
}

export function buildFloorServer(source: FloorSource, options: FloorServerOptions): FastifyInstance {
  if (!isLoopback(options.host) && (options.viewerToken === undefined || options.viewerToken.length < 16)) {
    throw new Error('a floor server bound beyond this machine needs a viewer token of at least 16 characters');
  }
  const app = Fastify({ logger: false, routerOptions: { maxParamLength: 128 } });
  const hostRule = createHostRule(options.host, options.allowedHosts ?? []);
  app.addHook('onRequest', async (request, reply) => {
    const connection = request.raw.socket;
    if (!hostRule.allows(splitTarget(request.raw.url ?? '/').authority ?? request.headers.host, connection)) {
      await reply.code(421).send({ statusCode: 421, error: 'Misdirected Request', message: hostRule.refusal(connection) });
      return reply;
    }
    const url = new URL(request.raw.url ?? '/', 'http://floor');
    if (url.pathname.startsWith('/api/') && options.viewerToken !== undefined && !mayView({ viewerToken: options.viewerToken, token: options.viewerToken }, request.headers, url.searchParams)) {
      await reply.code(401).send({ statusCode: 401, error: 'Unauthorized', message: 'this floor view needs its viewer token (the address printed when it started)' });
      return reply;
    }
    return undefined;
  });
  app.addHook('onSend', async (_request, reply, payload) => {
    reply.headers(SECURITY_HEADERS);
    return payload;
  });
  app.get('/api/floor', () => source.view());
  app.get('/api/floor/history', () => ({ runs: source.history() }));
  void app.register(fastifyStatic, { root: FLOOR_PUBLIC_DIR, prefix: '/', wildcard: false, index: 'floor.html', cacheControl: false });
  return app;
}
