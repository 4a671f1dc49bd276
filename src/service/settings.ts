import { validateConfig } from '../config/load.js';
import { configSchema, type Config } from '../config/schema.js';
import { TapwardenError, quote } from '../errors.js';

/**
 * Settings that change while serving (POST /api/control/settings): the filter's step, leak,
 * leakShift and meanRemovalEvery, and every supervisor key. A request is a partial config of
 * those; it is overlaid on the settings in effect and validated by the same schema and
 * cross-checks as a config file. Anything else needs a restart.
 */

export const LIVE_FILTER_KEYS = ['step', 'leak', 'leakShift', 'meanRemovalEvery'] as const;
const SUPERVISOR_KEYS = Object.keys((configSchema.properties as unknown as Record<string, { properties: object }>)['supervisor']!.properties);

const isPlain = (v: unknown): v is Record<string, unknown> => typeof v === 'object' && v !== null && !Array.isArray(v);

/** The settings a request asks for over `current`, validated; throws a coded error naming the first bad key. */
export function liveSettings(current: Config, body: unknown): Config {
  if (!isPlain(body)) {
    throw new TapwardenError('TW_ERR_HTTP_BODY', { detail: `the body is ${quote(body)}; allowed: {"filter": {...}, "supervisor": {...}}` });
  }
  const next = structuredClone(current) as unknown as Record<string, Record<string, unknown>>;
  for (const [section, value] of Object.entries(body)) {
    const allowed: readonly string[] | null = section === 'filter' ? LIVE_FILTER_KEYS : section === 'supervisor' ? SUPERVISOR_KEYS : null;
    if (allowed === null) throw new TapwardenError('TW_ERR_SETTINGS_KEY', { key: section });
    if (!isPlain(value)) throw new TapwardenError('TW_ERR_HTTP_BODY', { detail: `${section} is ${quote(value)}; allowed: an object of ${section} keys` });
    for (const [key, v] of Object.entries(value)) {
      if (!allowed.includes(key)) throw new TapwardenError('TW_ERR_SETTINGS_KEY', { key: `${section}.${key}` });
      next[section]![key] = v;
    }
  }
  return validateConfig(next, 'POST /api/control/settings');
}

type Sections = { filter: Record<string, unknown>; supervisor: Record<string, unknown> };

/** `base`'s filter and supervisor with a settings event's changes ("section.key" -> to) applied, as copies. */
export function withChanges(base: { filter: object; supervisor: object }, changes: Readonly<Record<string, { to: unknown }>>): Sections {
  const next: Sections = { filter: { ...base.filter }, supervisor: { ...base.supervisor } };
  for (const [key, c] of Object.entries(changes)) {
    const [section, name] = key.split('.') as ['filter' | 'supervisor', string];
    next[section][name] = c.to;
  }
  return next;
}

/** The live part of a config, as status, snapshots and replies show it. */
export function liveView(config: Config): { filter: Record<string, unknown>; supervisor: Config['supervisor'] } {
  const f = config.filter as unknown as Record<string, unknown>;
  return { filter: Object.fromEntries(LIVE_FILTER_KEYS.map((k) => [k, f[k]])), supervisor: config.supervisor };
}
