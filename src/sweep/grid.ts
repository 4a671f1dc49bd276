import { parse as parseYaml } from 'yaml';
import { validateConfig } from '../config/load.js';
import { configSchema, type Config } from '../config/schema.js';
import { TapwardenError, quote } from '../errors.js';

/**
 * The parameter grid of a sweep: `--vary KEY=V1,V2,...` or `--vary KEY=A:B:STEP`, any key under
 * `filter.` or `supervisor.`; every combination of the values, each overlaid on the base config
 * and validated like a config file.
 */

/** Cells (combinations x recordings) a sweep runs without --yes. */
export const MAX_CELLS_WITHOUT_YES = 2000;
/** Values one range may expand to. */
const MAX_RANGE_VALUES = 1000;

export type Scalar = number | string | boolean | null;

export interface Axis {
  readonly key: string;
  readonly values: readonly Scalar[];
}

export interface Combination {
  /** KEY -> value, in the order the axes were given. */
  readonly parameters: Readonly<Record<string, Scalar>>;
  readonly config: Config;
}

const sections = configSchema.properties as unknown as Record<string, { properties: Record<string, unknown> }>;

/** The keys a sweep may vary. */
export function variableKeys(): string[] {
  return (['filter', 'supervisor'] as const).flatMap((s) => Object.keys(sections[s]!.properties).map((k) => `${s}.${k}`));
}

const usage = (detail: string) => new TapwardenError('TW_ERR_USAGE', { detail: `sweep: ${detail}` });

/** A number written as few digits as it needs (ranges do not print 0.30000000000000004). */
const tidy = (v: number) => Number(v.toPrecision(12));

export function parseAxis(arg: string): Axis {
  const eq = arg.indexOf('=');
  if (eq <= 0) throw usage(`--vary ${quote(arg)} is not allowed; allowed: KEY=V1,V2,... or KEY=A:B:STEP`);
  const key = arg.slice(0, eq).trim();
  const spec = arg.slice(eq + 1).trim();
  if (!variableKeys().includes(key)) {
    throw usage(`--vary key ${quote(key)} is not allowed; allowed: a key under filter. or supervisor. (${variableKeys().join(', ')})`);
  }
  const range = /^(-?[\d.e+-]+):(-?[\d.e+-]+):([\d.e+-]+)$/i.exec(spec);
  if (range) {
    const [a, b, step] = range.slice(1).map(Number) as [number, number, number];
    if (![a, b, step].every(Number.isFinite) || !(step > 0) || !(b >= a)) {
      throw usage(`--vary ${key}=${quote(spec)} is not allowed; allowed: A:B:STEP with numbers A <= B and STEP > 0`);
    }
    const count = Math.floor((b - a) / step + 1e-9) + 1;
    if (count > MAX_RANGE_VALUES) throw usage(`--vary ${key}=${spec} gives ${count} values; allowed: at most ${MAX_RANGE_VALUES} per key`);
    return { key, values: Array.from({ length: count }, (_, i) => tidy(a + i * step)) };
  }
  const values = spec.split(',').map((v) => v.trim());
  if (values.some((v) => v === '')) throw usage(`--vary ${key}=${quote(spec)} has an empty value; allowed: KEY=V1,V2,... (YAML scalars)`);
  const parsed = values.map((v) => parseYaml(v) as unknown);
  for (const [i, v] of parsed.entries()) {
    if (v !== null && !['number', 'string', 'boolean'].includes(typeof v)) {
      throw usage(`--vary ${key} value ${quote(values[i])} is not allowed; allowed: a number, true, false, null or a word`);
    }
  }
  if (new Set(parsed.map((v) => JSON.stringify(v))).size !== parsed.length) throw usage(`--vary ${key}=${quote(spec)} repeats a value; allowed: distinct values`);
  return { key, values: parsed as Scalar[] };
}

/** Every combination of the axes' values over the base config, each validated. */
export function combinations(base: Config, axes: readonly Axis[], baseFile: string): Combination[] {
  if (axes.length === 0) throw usage('no --vary given; allowed: one or more --vary KEY=V1,V2,... or KEY=A:B:STEP');
  const keys = axes.map((a) => a.key);
  const repeated = keys.find((k, i) => keys.indexOf(k) !== i);
  if (repeated !== undefined) throw usage(`--vary ${repeated} is given twice; allowed: each key once (list all its values in one --vary)`);
  let grid: Record<string, Scalar>[] = [{}];
  for (const a of axes) grid = grid.flatMap((g) => a.values.map((v) => ({ ...g, [a.key]: v })));
  return grid.map((parameters) => {
    const data = structuredClone(base) as unknown as Record<string, Record<string, unknown>>;
    for (const [k, v] of Object.entries(parameters)) {
      const [section, name] = k.split('.') as [string, string];
      data[section]![name] = v;
    }
    const where = `${baseFile} with ${Object.entries(parameters)
      .map(([k, v]) => `${k}=${JSON.stringify(v)}`)
      .join(' ')}`;
    return { parameters, config: validateConfig(data, where) };
  });
}
