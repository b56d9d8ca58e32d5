/**
 * The run on show and the runs before it:
 *   GET /api/run              state, recipe and plan summary of the run on show
 *   GET /api/run/snapshot     everything the dashboard shows, as the live feed's first message
 *   GET /api/runs             past runs in the runs folder, newest first
 *   GET /api/runs/:id         one run's header and summary
 *   GET /api/runs/:id/journal the journal, as a download
 *   GET /api/runs/:id/report  the run's report: one self-contained HTML page (made in a worker
 *                             thread, one at a time, so a live run's cuts never wait for it)
 * With a viewer token configured each needs it (header `x-fringe-viewer` or query `viewer`).
 */
import { createReadStream, existsSync } from 'node:fs';
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import { mayView } from '../auth.ts';
import { makeRunReportPage, RunReportError } from '../run-report.ts';
import { REPORT_CONTENT_SECURITY_POLICY } from '../run-report-page.ts';
import { listRuns, readJournalHeader, readSummary, runFolder } from '../run-store.ts';
import { errorSchema, runDetailResponse, runIdParams, runResponse, runsResponse, snapshotResponse, viewerQuery } from '../schemas.ts';

/** Refuses a request that may not view (shared with the live plugin through the same rule). */
export async function requireViewer(this: FastifyInstance, request: FastifyRequest, reply: FastifyReply): Promise<void> {
  const query = new URLSearchParams(request.url.includes('?') ? request.url.slice(request.url.indexOf('?') + 1) : '');
  if (!mayView(this.fringe, request.headers, query)) {
    await reply.code(401).send({ statusCode: 401, error: 'Unauthorized', message: 'viewing this server needs its viewer token (header x-fringe-viewer or ?viewer=)' });
  }
}

export function runsPlugin(app: FastifyInstance, _options: unknown, done: (error?: Error) => void): void {
  app.addHook('onRequest', requireViewer);
  const notFound = (id: string) => ({ statusCode: 404, error: 'Not Found', message: `no run "${id}" in the runs folder` });

  app.get('/run', { schema: { querystring: viewerQuery, response: { 200: runResponse, 401: errorSchema } } }, (_request, reply) => {
    const hub = app.fringe.hub;
    const snapshot = hub.snapshot();
    const recipe = hub.recipe;
    // The plan as it stands (re-planned after every layer): the layers still to come.
    const plan = hub.planNow();
    void reply.send({
      source: snapshot.source,
      runId: snapshot.runId,
      speed: snapshot.speed,
      commandsAccepted: snapshot.commandsAccepted,
      status: snapshot.status,
      recipe: {
        name: recipe.name,
        design: recipe.design.name,
        layers: recipe.layers.length,
        band: recipe.design.band ?? null,
        chips: recipe.chips.map((c) => c.label),
      },
      plan: {
        fromLayer: plan.fromLayer,
        durationS: plan.durationS,
        layers: plan.layers.map((l) => ({
          number: l.number,
          material: l.material,
          chip: l.chip,
          cut: l.cut,
          targetNm: l.targetNm,
          wavelengthNm: l.wavelengthNm,
          durationS: l.durationS,
          triggerSignal: l.triggerSignal,
          precisionNm: l.precisionNm,
          warnings: l.warnings.map((w) => w.message),
        })),
      },
      layers: snapshot.layers,
    });
  });

  app.get('/run/snapshot', { schema: { querystring: viewerQuery, response: { 200: snapshotResponse, 401: errorSchema } } }, (_request, reply) => {
    void reply.send(app.fringe.hub.snapshot());
  });

  app.get('/runs', { schema: { querystring: viewerQuery, response: { 200: runsResponse, 401: errorSchema } } }, (_request, reply) => {
    void reply.send({ runs: listRuns(app.fringe.runsDir) });
  });

  app.get<{ Params: { id: string } }>(
    '/runs/:id',
    { schema: { params: runIdParams, querystring: viewerQuery, response: { 200: runDetailResponse, 401: errorSchema, 404: errorSchema } } },
    (request, reply) => {
      const folder = runFolder(app.fringe.runsDir, request.params.id);
      if (!folder) {
        void reply.code(404).send(notFound(request.params.id));
        return;
      }
      void reply.send({ id: folder.id, header: readJournalHeader(folder.journalFile), summary: readSummary(folder), replayable: existsSync(folder.recipeFile) });
    },
  );

  app.get<{ Params: { id: string } }>(
    '/runs/:id/journal',
    { schema: { params: runIdParams, querystring: viewerQuery, response: { 401: errorSchema, 404: errorSchema } } },
    (request, reply) => {
      const folder = runFolder(app.fringe.runsDir, request.params.id);
      if (!folder) {
        void reply.code(404).send(notFound(request.params.id));
        return;
      }
      void reply
        .type('application/x-ndjson; charset=utf-8')
        .header('content-disposition', `attachment; filename="${folder.id}-journal.ndjson"`)
        .send(createReadStream(folder.journalFile));
    },
  );
  let reportBusy = false;
  app.get<{ Params: { id: string } }>(
    '/runs/:id/report',
    { schema: { params: runIdParams, querystring: viewerQuery, response: { 401: errorSchema, 404: errorSchema, 409: errorSchema, 503: errorSchema } } },
    async (request, reply) => {
      const folder = runFolder(app.fringe.runsDir, request.params.id);
      if (!folder) return reply.code(404).send(notFound(request.params.id));
      if (reportBusy) {
        return reply.code(503).header('retry-after', '5').send({ statusCode: 503, error: 'Service Unavailable', message: 'another report is being made; try again in a few seconds' });
      }
      reportBusy = true;
      try {
        const page = await makeRunReportPage(folder.dir, folder.id);
        // Its own policy: the page's one style element by hash, nothing fetched, nothing run (the hook keeps a route's own).
        return reply.type('text/html; charset=utf-8').header('content-security-policy', REPORT_CONTENT_SECURITY_POLICY).send(page);
      } catch (error) {
        if (!(error instanceof RunReportError)) throw error;
        // Paths stay on the server: the sentence names the run, not the folder.
        const message = error.message.split(folder.dir).join(`run ${folder.id}`);
        return reply.code(409).send({ statusCode: 409, error: 'Conflict', message: `no report can be made: ${message}` });
      } finally {
        reportBusy = false;
      }
    },
  );
  done();
}
