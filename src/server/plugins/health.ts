/** `GET /api/health`: is the server up, and what is the run doing. Open to all (no data beyond the phase). */
import type { FastifyInstance } from 'fastify';
import { errorSchema, healthResponse } from '../schemas.ts';

export function healthPlugin(app: FastifyInstance, _options: unknown, done: (error?: Error) => void): void {
  const startedMs = performance.now();
  app.get('/health', { schema: { response: { 200: healthResponse, 500: errorSchema } } }, (_request, reply) => {
    const hub = app.fringe.hub;
    const status = hub.status();
    void reply.send({
      ok: true,
      uptimeS: (performance.now() - startedMs) / 1000,
      run: { source: hub.source, phase: status.phase, running: status.running },
      liveClients: app.fringe.liveStats.clients,
    });
  });
  done();
}
