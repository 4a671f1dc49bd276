import { TapwardenError, quote } from '../errors.js';

/** A --key SECONDS option: undefined when absent, else a number >= 0. */
export function seconds(command: string, key: string, value: unknown): number | undefined {
  if (value === undefined) return undefined;
  const v = Number(value);
  if (typeof value !== 'string' || value.trim() === '' || !(v >= 0) || !Number.isFinite(v)) {
    throw new TapwardenError('TW_ERR_USAGE', { detail: `${command}: --${key} ${quote(value)} is not allowed; allowed: seconds, a number >= 0` });
  }
  return v;
}
