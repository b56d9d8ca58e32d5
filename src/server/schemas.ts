/**
 * JSON schemas of the HTTP API: requests are validated with them, responses serialised by them.
 * Nested views (stack rows, traces, events) are declared open (`additionalProperties: true`)
 * so that the serialiser passes them whole; their shapes are the TypeScript types in views.ts.
 */
import { RUN_ID_PATTERN } from './run-store.ts';

const nullableNumber = { type: ['number', 'null'] } as const;
const nullableString = { type: ['string', 'null'] } as const;
const open = { type: 'object', additionalProperties: true } as const;

export const errorSchema = {
  type: 'object',
  properties: { statusCode: { type: 'integer' }, error: { type: 'string' }, message: { type: 'string' } },
  required: ['statusCode', 'error', 'message'],
} as const;

export const statusSchema = {
  type: 'object',
  properties: {
    phase: { type: 'string' },
    running: { type: 'boolean' },
    nowS: { type: 'number' },
    layer: { type: ['integer', 'null'] },
    layers: { type: 'integer' },
    material: nullableString,
    cut: nullableString,
    cutBy: nullableString,
    targetNm: nullableNumber,
    thicknessNm: nullableNumber,
    plusMinusNm: nullableNumber,
    estimateSource: nullableString,
    layerElapsedS: nullableNumber,
    timeToCutS: nullableNumber,
    approaching: { type: 'boolean' },
    openAlerts: { type: 'integer' },
    worstAlert: { anyOf: [open, { type: 'null' }] },
  },
  required: ['phase', 'running', 'nowS', 'layer', 'layers', 'openAlerts'],
} as const;

export const healthResponse = {
  type: 'object',
  properties: {
    ok: { type: 'boolean' },
    uptimeS: { type: 'number' },
    run: {
      type: 'object',
      properties: { source: { type: 'string' }, phase: { type: 'string' }, running: { type: 'boolean' } },
      required: ['source', 'phase', 'running'],
    },
    liveClients: { type: 'integer' },
  },
  required: ['ok', 'uptimeS', 'run'],
} as const;

export const runResponse = {
  type: 'object',
  properties: {
    source: { type: 'string' },
    runId: nullableString,
    speed: nullableNumber,
    commandsAccepted: { type: 'boolean' },
    status: statusSchema,
    recipe: {
      type: 'object',
      properties: {
        name: { type: 'string' },
        design: { type: 'string' },
        layers: { type: 'integer' },
        band: { anyOf: [{ type: 'object', properties: { fromNm: { type: 'number' }, toNm: { type: 'number' } } }, { type: 'null' }] },
        chips: { type: 'array', items: { type: 'string' } },
      },
      required: ['name', 'layers'],
    },
    plan: {
      type: 'object',
      properties: {
        fromLayer: { type: 'integer' },
        durationS: { type: 'number' },
        layers: {
          type: 'array',
          items: {
            type: 'object',
            properties: {
              number: { type: 'integer' },
              material: { type: 'string' },
              chip: { type: 'string' },
              cut: { type: 'string' },
              targetNm: { type: 'number' },
              wavelengthNm: { type: 'number' },
              durationS: { type: 'number' },
              triggerSignal: { type: 'number' },
              precisionNm: { type: 'number' },
              warnings: { type: 'array', items: { type: 'string' } },
            },
          },
        },
      },
      required: ['fromLayer', 'durationS', 'layers'],
    },
    layers: { type: 'array', items: open },
  },
  required: ['source', 'status', 'recipe', 'plan', 'layers'],
} as const;

export const snapshotResponse = {
  type: 'object',
  properties: {
    version: { type: 'integer' },
    source: { type: 'string' },
    runId: nullableString,
    speed: nullableNumber,
    estimator: { type: 'string' },
    recipe: { type: 'string' },
    commandsAccepted: { type: 'boolean' },
    status: statusSchema,
    layers: { type: 'array', items: open },
    trace: { anyOf: [open, { type: 'null' }] },
    crystal: open,
    alerts: { type: 'array', items: open },
    log: { type: 'array', items: open },
    outcome: { anyOf: [open, { type: 'null' }] },
  },
  required: ['version', 'source', 'recipe', 'status', 'layers', 'crystal', 'alerts', 'log'],
} as const;

const listingSchema = {
  type: 'object',
  properties: {
    id: { type: 'string' },
    recipe: nullableString,
    startedAt: nullableString,
    source: nullableString,
    outcome: { type: 'string' },
    layers: { type: ['integer', 'null'] },
    layersPlanned: { type: ['integer', 'null'] },
    layersCutByRule: { type: ['integer', 'null'] },
    durationS: nullableNumber,
    rmsErrorPercent: nullableNumber,
    rmsTrueErrorPercent: nullableNumber,
    journalBytes: { type: 'integer' },
    replayable: { type: 'boolean' },
    calibration: nullableString,
  },
  required: ['id', 'outcome', 'journalBytes', 'replayable'],
} as const;

export const runsResponse = {
  type: 'object',
  properties: { runs: { type: 'array', items: listingSchema } },
  required: ['runs'],
} as const;

export const runIdParams = {
  type: 'object',
  properties: { id: { type: 'string', pattern: RUN_ID_PATTERN } },
  required: ['id'],
  additionalProperties: false,
} as const;

export const runDetailResponse = {
  type: 'object',
  properties: {
    id: { type: 'string' },
    header: { anyOf: [open, { type: 'null' }] },
    summary: { anyOf: [open, { type: 'null' }] },
    replayable: { type: 'boolean' },
  },
  required: ['id', 'header', 'summary', 'replayable'],
} as const;

/** Viewer token as a query parameter (the header `x-fringe-viewer` works too). */
export const viewerQuery = {
  type: 'object',
  properties: { viewer: { type: 'string', maxLength: 200 } },
  additionalProperties: false,
} as const;

export const emptyBody = {
  type: 'object',
  properties: {},
  additionalProperties: false,
} as const;

export const acknowledgeBody = {
  type: 'object',
  properties: { alertId: { type: 'string', pattern: '^A[0-9]{1,9}$', description: 'the id of an open alert, e.g. A3' } },
  required: ['alertId'],
  additionalProperties: false,
} as const;

export const commandResponse = {
  type: 'object',
  properties: {
    applied: { type: 'boolean' },
    action: { type: 'string' },
    timeS: { type: 'number' },
    events: { type: 'array', items: open },
  },
  required: ['applied', 'action', 'timeS', 'events'],
} as const;

export const commandsListResponse = {
  type: 'object',
  properties: {
    actions: { type: 'array', items: { type: 'string' } },
    commandsAccepted: { type: 'boolean' },
  },
  required: ['actions', 'commandsAccepted'],
} as const;
