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

/** Every action may name one measurement channel; without it, it applies to every one. */
const channel = { type: 'integer', minimum: 0, maximum: 255 } as const;
const frozenBody = {
  type: 'object',
  additionalProperties: false,
  required: ['frozen'],
  properties: { frozen: { type: 'boolean' }, channel },
} as const;
/** No body, {}, or {"channel": N}: nothing else. */
const emptyBody = { type: ['object', 'null'], additionalProperties: false, properties: { channel } } as const;

type Body = { frozen: boolean; channel?: number } | null;

/**
 * POST /api/control/*: operator actions, behind the bearer token; refused outright when no token
 * is configured. Each reply states the engine's flags after the action.
 */
export function controlPlugin(
  token: string | null,
  measured: readonly number[],
  control: (op: ControlOp, channel: number | null) => Promise<WeightsReply>,
  settings: (body: unknown) => Promise<object>,
  /** Whether marks capture (capture.dir set, mark among capture.triggers). */
  marks: boolean,
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
    /** The body's channel, one of the measurement channels, or null for every one. */
    const channelOf = (body: { channel?: number } | null): number | null => {
      const ch = body?.channel ?? null;
      if (ch !== null && !measured.includes(ch)) {
        throw new TapwardenError('TW_ERR_HTTP_BODY', { detail: `channel ${ch} is not a measurement channel; allowed: ${measured.join(', ')} (or no channel: every one)` });
      }
      return ch;
    };
    const route = (path: string, body: object, op: (b: { frozen: boolean }) => ControlOp) =>
      app.post(path, { schema: { body } }, async (req: FastifyRequest<{ Body: Body }>) => {
        const ch = channelOf(req.body);
        const reply = await control(op(req.body ?? { frozen: false }), ch);
        req.log.info({ control: path, body: req.body ?? null }, 'control request applied');
        const states = reply.channels
          .filter((c) => ch === null || c.channel === ch)
          .map((c) => ({ channel: c.channel, cleanVersion: c.cleanVersion, adapting: c.adapting, handoffsHeld: c.handoffsHeld }));
        return { ok: true, ...states[0]!, channels: states };
      });
    route('/api/control/handoff', emptyBody, () => ({ kind: 'handoff' }));
    route('/api/control/rollback', emptyBody, () => ({ kind: 'rollback' }));
    route('/api/control/reset', emptyBody, () => ({ kind: 'reset' }));
    route('/api/control/adaptation', frozenBody, (b) => ({ kind: 'adaptation', frozen: b.frozen }));
    route('/api/control/handoffs', frozenBody, (b) => ({ kind: 'handoffs', frozen: b.frozen }));
    const markBody = {
      type: ['object', 'null'],
      additionalProperties: false,
      properties: { note: { type: 'string', maxLength: 500 }, channel },
    } as const;
    app.post('/api/control/mark', { schema: { body: markBody } }, async (req: FastifyRequest<{ Body: { note?: string; channel?: number } | null }>) => {
      if (!marks) throw new TapwardenError('TW_ERR_CAPTURE_OFF');
      await control({ kind: 'mark', note: req.body?.note ?? null }, channelOf(req.body));
      req.log.info({ control: '/api/control/mark', body: req.body ?? null }, 'operator mark: an episode is being captured');
      return { ok: true, capture: 'the episode around now is written once its seconds after have streamed' };
    });
    app.post('/api/control/settings', { schema: { body: { type: 'object' } } }, async (req) => {
      const r = await settings(req.body);
      req.log.info({ control: '/api/control/settings', body: req.body }, 'settings accepted; they take effect at the next window boundary');
      return r;
    });
  };
}
