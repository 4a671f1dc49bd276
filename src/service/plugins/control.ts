import { timingSafeEqual } from 'node:crypto';
import type { FastifyPluginAsync, FastifyRequest } from 'fastify';
import { TapwardenError } from '../../errors.js';
import { sendError } from '../app.js';
import type { ControlOp, WeightsReply } from '../protocol.js';

function tokensEqual(a: string, b: string): boolean {
  const x = Buffer.from(a);
  const y = Buffer.from(b);
  return x.length === y.length && timingSafeEqual(x, y);
}

const frozenBody = {
  type: 'object',
  additionalProperties: false,
  required: ['frozen'],
  properties: { frozen: { type: 'boolean' } },
} as const;
/** No body, or {}: nothing else. */
const emptyBody = { type: ['object', 'null'], additionalProperties: false, properties: {} } as const;

/**
 * POST /api/control/*: operator actions, behind the bearer token; refused outright when no token
 * is configured. Each reply states the engine's flags after the action.
 */
export function controlPlugin(
  token: string | null,
  control: (op: ControlOp) => Promise<WeightsReply>,
  settings: (body: unknown) => Promise<object>,
): FastifyPluginAsync {
  return async (app) => {
    app.addHook('onRequest', async (req, reply) => {
      if (token === null) return sendError(reply, new TapwardenError('TW_ERR_AUTH_NOT_CONFIGURED'));
      const given = /^Bearer (.+)$/.exec(req.headers.authorization ?? '')?.[1];
      if (given === undefined || !tokensEqual(given, token)) {
        reply.header('www-authenticate', 'Bearer realm="tapwarden control"');
        return sendError(reply, new TapwardenError('TW_ERR_AUTH_TOKEN'));
      }
    });
    const route = (path: string, body: object, op: (b: { frozen: boolean }) => ControlOp) =>
      app.post(path, { schema: { body } }, async (req: FastifyRequest<{ Body: { frozen: boolean } }>) => {
        const reply = await control(op(req.body));
        req.log.info({ control: path, body: req.body ?? null }, 'control request applied');
        return { ok: true, cleanVersion: reply.cleanVersion, adapting: reply.adapting, handoffsHeld: reply.handoffsHeld };
      });
    route('/api/control/handoff', emptyBody, () => ({ kind: 'handoff' }));
    route('/api/control/rollback', emptyBody, () => ({ kind: 'rollback' }));
    route('/api/control/reset', emptyBody, () => ({ kind: 'reset' }));
    route('/api/control/adaptation', frozenBody, (b) => ({ kind: 'adaptation', frozen: b.frozen }));
    route('/api/control/handoffs', frozenBody, (b) => ({ kind: 'handoffs', frozen: b.frozen }));
    app.post('/api/control/settings', { schema: { body: { type: 'object' } } }, async (req) => {
      const r = await settings(req.body);
      req.log.info({ control: '/api/control/settings', body: req.body }, 'settings accepted; they take effect at the next window boundary');
      return r;
    });
  };
}
