import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { serveWith, stopAll } from '../helpers/serve.js';
import { tmpDir } from '../helpers/tools.js';

// POST /api/control/settings on a running service, with real HTTP: validated like a config file
// (the same schema and cross-checks), applied at the next window boundary, logged as an event
// with old and new values, shown in /api/status, counted in /metrics, kept in the snapshot and
// restored from it.

const TOKEN = 'bench-7-control-token-0123456789';
afterEach(stopAll);

describe('settings without a restart', () => {
  it('applies a partial config at a window boundary, logs it, shows it, saves it, restores it', async () => {
    const dir = tmpDir();
    const snapshot = join(dir, 'weights.json');
    const yaml = `persistence:\n  file: ${snapshot}\n  minIntervalSeconds: 0\nsupervisor:\n  windowSeconds: 0.25\n`;
    const s = await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    const post = (body: unknown, token = TOKEN) =>
      s.get('/api/control/settings', { method: 'POST', headers: { 'content-type': 'application/json', authorization: `Bearer ${token}` }, body: JSON.stringify(body) });
    // Wait for a handoff, so the snapshot has weights to go with the settings.
    await s.logged((l) => (l['event'] as { type?: string } | undefined)?.type === 'handoff', 30_000);
    const ok = await post({ filter: { step: 0.3, leak: 0.0001 }, supervisor: { passesRequired: 3 } });
    expect(ok.status).toBe(200);
    expect(await ok.json()).toMatchObject({ ok: true, appliesAt: 'the next window boundary', filter: { step: 0.3, leak: 0.0001 }, supervisor: { passesRequired: 3 } });
    const event = (await s.logged((l) => (l['event'] as { type?: string } | undefined)?.type === 'settings', 10_000))['event'] as Record<string, any>;
    expect(event.changes).toEqual({
      'filter.step': { from: 0.5, to: 0.3 },
      'filter.leak': { from: 0, to: 0.0001 },
      'supervisor.passesRequired': { from: 2, to: 3 },
    });
    // At a window boundary: the event's sample is a whole number of 0.25 s windows.
    expect(event.sample % 4000).toBe(0);
    const status = (await (await s.get('/api/status')).json()) as Record<string, any>;
    expect(status.filter.step).toBe(0.3);
    expect(status.supervisor.passesRequired).toBe(3);
    expect(status.pendingSettings).toBeNull();
    expect(await s.metric('tapwarden_settings_changes_total{channel="1"}')).toBe(1);
    // Refused, each with its code: a key that needs a restart, a value outside the schema, a
    // value that fails a cross-check, no token.
    const refusals: [unknown, number, string][] = [
      [{ filter: { taps: 32 } }, 400, 'TW_ERR_SETTINGS_KEY'],
      [{ input: { desiredChannel: 0 } }, 400, 'TW_ERR_SETTINGS_KEY'],
      [{ filter: { arithmetic: 'q15' } }, 400, 'TW_ERR_SETTINGS_KEY'],
      [{ supervisor: { windowSeconds: -1 } }, 400, 'TW_ERR_CONFIG_VALUE'],
      [{ filter: { step: 1.5, leak: 0.9 } }, 400, 'TW_ERR_CONFIG_VALUE'],
      [[1, 2], 400, 'TW_ERR_HTTP_BODY'],
    ];
    for (const [body, code, error] of refusals) {
      const r = await post(body);
      expect(r.status, JSON.stringify(body)).toBe(code);
      expect(((await r.json()) as any).error.code).toBe(error);
    }
    expect((await post({ filter: { step: 0.2 } }, 'wrong-token-wrong-token')).status).toBe(401);
    const bad = (await (await post({ filter: { taps: 32 } })).json()) as any;
    expect(bad.error.message).toMatch(/filter\.taps cannot change while serving; allowed: filter\.step, filter\.leak, filter\.leakShift, filter\.meanRemovalEvery and supervisor\.\*/);
    expect(await s.metric('tapwarden_settings_changes_total{channel="1"}')).toBe(1);
    expect(await s.stop()).toBe(0);
    const saved = JSON.parse(readFileSync(snapshot, 'utf8'));
    expect(saved.settings.filter).toEqual({ step: 0.3, leak: 0.0001, leakShift: null, meanRemovalEvery: null });
    expect(saved.settings.supervisor.passesRequired).toBe(3);

    // A restart resumes with the weights and the settings.
    const s2 = await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    await s2.logged((l) => (l['event'] as { type?: string } | undefined)?.type === 'settings', 10_000);
    const st2 = (await (await s2.get('/api/status')).json()) as Record<string, any>;
    expect(st2.filter.step).toBe(0.3);
    expect(st2.supervisor.passesRequired).toBe(3);
    expect(s2.logs.some((l) => l['why'] === 'restored from the snapshot')).toBe(true);
  });
});
