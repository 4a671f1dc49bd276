import { existsSync, readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import type { ErrorObject, ValidateFunction } from 'ajv';
import { parseDocument } from 'yaml';
import { NLMS_STEP_BOUND, PBFDAF_STEP_BOUND } from '../dsp/bounds.js';
import { TapwardenError, oneLine, quote, warningLine } from '../errors.js';
import { AJV_OPTIONS, configSchema, referenceChannels, type Config } from './schema.js';

export const DEFAULT_CONFIG_PATH = fileURLToPath(new URL('../../config/default.yaml', import.meta.url));

/**
 * The schema's validator: the code ajv generated for it at build time when it is there (no ajv
 * load or schema compile at start-up), else compiled now (running from the sources).
 */
const GENERATED = new URL('./validator.generated.js', import.meta.url);
const validate: ValidateFunction<Config> = existsSync(GENERATED)
  ? ((await import(GENERATED.href)) as { default: ValidateFunction<Config> }).default
  : new (await import('ajv')).Ajv(AJV_OPTIONS).compile<Config>(configSchema);

type Plain = Record<string, unknown>;
const isPlain = (v: unknown): v is Plain => typeof v === 'object' && v !== null && !Array.isArray(v);

/** Overlays `over` on `base` key by key; an explicit null in `over` wins. */
function merge(base: Plain, over: Plain): Plain {
  const out: Plain = { ...base };
  for (const [k, v] of Object.entries(over)) {
    out[k] = isPlain(v) && isPlain(base[k]) ? merge(base[k] as Plain, v) : v;
  }
  return out;
}

/**
 * Reads a YAML file. Syntax errors throw TW_ERR_CONFIG_SYNTAX; an empty file is reported as
 * empty; YAML warnings (an unknown tag, say) become one coded line each through `onWarning`.
 */
function readYaml(file: string, onWarning: (line: string) => void): unknown {
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch (err) {
    throw new TapwardenError('TW_ERR_CONFIG_READ', { file, reason: oneLine(err) });
  }
  const doc = parseDocument(text, { logLevel: 'silent', prettyErrors: false, uniqueKeys: true });
  if (doc.errors.length > 0) {
    throw new TapwardenError('TW_ERR_CONFIG_SYNTAX', { file, reason: oneLine(doc.errors[0]!.message) });
  }
  for (const w of doc.warnings) onWarning(warningLine('TW_WARN_CONFIG_YAML', `config ${file}: ${w.message}`));
  const value: unknown = doc.toJS({ maxAliasCount: 100 });
  if (value === null || value === undefined) {
    throw new TapwardenError('TW_ERR_CONFIG_VALUE', { file, detail: 'the file is empty; allowed: a mapping of sections (input, filter, supervisor, ...), or no --config at all' });
  }
  return value;
}

function keyOf(path: string): string {
  return path.replace(/^\//, '').split('/').join('.');
}

function valueAt(data: unknown, path: string): unknown {
  let v = data;
  for (const part of path.split('/').filter(Boolean)) v = isPlain(v) ? v[part] : undefined;
  return v;
}

function allowedOf(e: ErrorObject, parentSchema: Plain | undefined): string {
  const p = e.params as Record<string, unknown>;
  switch (e.keyword) {
    case 'enum':
      return (p['allowedValues'] as unknown[]).join(', ');
    case 'type': {
      const t = [parentSchema?.['type']].flat().filter(Boolean).join(' or ');
      const lo = parentSchema?.['minimum'] ?? parentSchema?.['exclusiveMinimum'];
      const hi = parentSchema?.['maximum'] ?? parentSchema?.['exclusiveMaximum'];
      return lo !== undefined && hi !== undefined ? `${t} in ${lo}..${hi}` : t;
    }
    case 'minimum':
      return `>= ${p['limit']}`;
    case 'exclusiveMinimum':
      return `> ${p['limit']}`;
    case 'maximum':
      return `<= ${p['limit']}`;
    case 'exclusiveMaximum':
      return `< ${p['limit']}`;
    default:
      return e.message ?? e.keyword;
  }
}

/** One line naming the key, the value and what is allowed. */
function describe(e: ErrorObject, data: unknown): string {
  const p = e.params as Record<string, unknown>;
  if (e.keyword === 'additionalProperties') {
    const key = keyOf(`${e.instancePath}/${p['additionalProperty']}`);
    const parent = valueAt(configSchema, e.schemaPath.replace(/^#/, '').replace(/\/additionalProperties$/, '')) as Plain;
    return `${key} is not a known key; known keys here: ${Object.keys(parent['properties'] as Plain).join(', ')}`;
  }
  if (e.keyword === 'required') return `${keyOf(`${e.instancePath}/${p['missingProperty']}`)} is missing`;
  const value = valueAt(data, e.instancePath);
  const parent = valueAt(configSchema, e.schemaPath.replace(/^#/, '').replace(/\/[^/]+$/, '')) as Plain | undefined;
  return `${keyOf(e.instancePath) || '(top level)'} = ${quote(value)} is not allowed; allowed: ${allowedOf(e, parent)}`;
}

function deepFreeze<T>(v: T): T {
  if (isPlain(v)) {
    for (const x of Object.values(v)) deepFreeze(x);
    Object.freeze(v);
  }
  return v;
}

/** Checks that need more than one key. */
function crossChecks(c: Config): string | null {
  const { filter, input, supervisor } = c;
  const refs = referenceChannels(c);
  const refKey = input.referenceChannels === null ? 'input.referenceChannel' : 'input.referenceChannels';
  if (input.desiredChannels !== null) {
    if (input.desiredChannels.some((ch) => refs.includes(ch))) {
      return `input.desiredChannels = ${quote(input.desiredChannels)} is not allowed; allowed: channels other than ${refKey} (${refs.join(', ')})`;
    }
  } else if (refs.includes(input.desiredChannel)) {
    return `input.desiredChannel = ${input.desiredChannel} is not allowed; allowed: a channel other than ${refKey} (${refs.join(', ')})`;
  }
  const measured = input.desiredChannels?.length ?? 1;
  if (c.stream.workers > measured) {
    return `stream.workers = ${c.stream.workers} is not allowed; allowed: 1 to ${measured} (the measurement channels to spread over them)`;
  }
  if (refs.length > 1 && (filter.algorithm === 'pbfdaf' || filter.arithmetic === 'float32')) {
    const key = filter.algorithm === 'pbfdaf' ? 'algorithm' : 'arithmetic';
    return `filter.${key} = ${quote(filter[key])} is not allowed with several references (input.referenceChannels ${quote(refs)}); allowed: algorithm lms or nlms in float64, q15 or q31 (the multiple-input filter)`;
  }
  if (filter.algorithm === 'pbfdaf') {
    const unsupported = (
      [
        ['arithmetic', filter.arithmetic !== 'float64', 'float64'],
        ['noiseInjectionDb', filter.noiseInjectionDb !== null, 'null'],
        ['meanRemovalEvery', filter.meanRemovalEvery !== null, 'null'],
      ] as const
    ).find(([, bad]) => bad);
    if (unsupported) {
      const [key, , allowed] = unsupported;
      return `filter.${key} = ${quote(filter[key])} is not allowed with algorithm pbfdaf; allowed: ${allowed}`;
    }
    if (filter.taps % filter.blockSize !== 0) {
      return `filter.taps = ${filter.taps} is not allowed with algorithm pbfdaf; allowed: a multiple of filter.blockSize (${filter.blockSize})`;
    }
    if (!(filter.step < PBFDAF_STEP_BOUND)) {
      return `filter.step = ${filter.step} is not allowed with algorithm pbfdaf; allowed: 0 < step < ${PBFDAF_STEP_BOUND} (the measured stability bound of both forms)`;
    }
  }
  if (filter.algorithm === 'nlms' && !(filter.step < NLMS_STEP_BOUND)) {
    return `filter.step = ${filter.step} is not allowed; allowed: 0 < step < ${NLMS_STEP_BOUND} (the NLMS stability bound)`;
  }
  if ((filter.arithmetic === 'q15' || filter.arithmetic === 'q31') && Math.round(filter.step * 65536) === 0) {
    return `filter.step = ${filter.step} is not allowed in ${filter.arithmetic}; allowed: >= 2^-17 (the step is held in Q16)`;
  }
  if (filter.step * filter.leak >= 1) {
    return `filter.leak = ${filter.leak} is not allowed with step ${filter.step}; allowed: step * leak < 1 (the leak factor 1 - step * leak must stay in (0, 1])`;
  }
  if (supervisor.crossfadeSeconds > supervisor.windowSeconds) {
    return `supervisor.crossfadeSeconds = ${supervisor.crossfadeSeconds} is not allowed; allowed: <= supervisor.windowSeconds (${supervisor.windowSeconds})`;
  }
  return null;
}

/** Validates a merged configuration object; throws TW_ERR_CONFIG_VALUE naming the first bad key. */
export function validateConfig(data: unknown, file: string): Config {
  if (!validate(data)) {
    throw new TapwardenError('TW_ERR_CONFIG_VALUE', { file, detail: describe(validate.errors![0]!, data) });
  }
  const problem = crossChecks(data);
  if (problem !== null) throw new TapwardenError('TW_ERR_CONFIG_VALUE', { file, detail: problem });
  return deepFreeze(data);
}

/**
 * The embedded default overlaid with each file in turn (a base config, then a policy), validated
 * and frozen. Errors name the last file; YAML warnings go to `onWarning` (default: stderr).
 */
export function loadConfig(
  file?: string | readonly string[],
  overrides: Plain = {},
  onWarning: (line: string) => void = (line) => process.stderr.write(line + '\n'),
): Config {
  const files = file === undefined ? [] : typeof file === 'string' ? [file] : file;
  return overlayConfig(readYaml(DEFAULT_CONFIG_PATH, onWarning) as Plain, files, overrides, onWarning);
}

/** A configuration (a capture's, say) overlaid with each file in turn, validated and frozen. */
export function overlayConfig(
  base: Plain | Config,
  files: readonly string[],
  overrides: Plain = {},
  onWarning: (line: string) => void = (line) => process.stderr.write(line + '\n'),
): Config {
  let data = base as Plain;
  for (const f of files) {
    const user = readYaml(f, onWarning);
    if (!isPlain(user)) {
      throw new TapwardenError('TW_ERR_CONFIG_VALUE', { file: f, detail: `the top level is ${quote(user)}; allowed: a mapping of sections (input, filter, supervisor, output, ...)` });
    }
    data = merge(data, user);
  }
  return validateConfig(merge(data, overrides), files.at(-1) ?? DEFAULT_CONFIG_PATH);
}
