/**
 * Every error tapwarden reports on purpose, defined once. Codes are stable: a retired code is
 * never reused. README.md ("Errors") documents each one; a test checks that it does.
 */

interface ErrorDef {
  /** Message template; {name} placeholders are filled from the params. */
  readonly message: string;
  /** Exit status of the CLI. */
  readonly exitCode: number;
  /** HTTP status where the error can reach an HTTP client. */
  readonly httpStatus?: number;
}

export const ERRORS = {
  TW_ERR_USAGE: { message: '{detail}', exitCode: 2 },
  TW_ERR_CONFIG_READ: { message: 'cannot read config {file}: {reason}', exitCode: 2 },
  TW_ERR_CONFIG_SYNTAX: { message: 'config {file} is not valid YAML: {reason}', exitCode: 2 },
  TW_ERR_CONFIG_VALUE: { message: 'config {file}: {detail}', exitCode: 2, httpStatus: 400 },
  TW_ERR_CONFIG_STEP_BOUND: {
    message:
      'config {file}: filter.step = {step} is not allowed for this reference; allowed: below the LMS mean-square bound 2/tr(R + leak I) = {bound} (mean convergence alone needs below 2/(lambda_max + leak) = {meanBound}); {figures}',
    exitCode: 2,
    httpStatus: 400,
  },
  TW_ERR_SETTINGS_KEY: {
    message: 'settings: {key} cannot change while serving; allowed: filter.step, filter.leak, filter.leakShift, filter.meanRemovalEvery and supervisor.* (restart for the rest)',
    exitCode: 1,
    httpStatus: 400,
  },
  TW_ERR_INPUT_OPEN: { message: 'cannot open {file}: {reason}', exitCode: 3 },
  TW_ERR_CAPTURE: { message: 'capture {file} {detail}', exitCode: 3 },
  TW_ERR_CAPTURE_OFF: { message: 'captures are off; allowed: a mark once capture.dir is set and capture.triggers has mark', exitCode: 1, httpStatus: 409 },
  TW_ERR_WAV_NOT_RIFF: { message: '{file} is not a WAV file: {reason}', exitCode: 3 },
  TW_ERR_WAV_TRUNCATED: { message: '{file} is truncated: {reason}', exitCode: 3 },
  TW_ERR_WAV_ENCODING: {
    message: '{file}: unsupported encoding {encoding}; allowed: PCM 8, 16, 24 or 32-bit, IEEE float 32 or 64-bit (plain or WAVE_FORMAT_EXTENSIBLE)',
    exitCode: 3,
  },
  TW_ERR_WAV_CHANNEL: {
    message: '{file} has {channels} channel(s) (0..{last}) but {key} = {value}',
    exitCode: 3,
  },
  TW_ERR_WAV_RATE: { message: '{file}: sample rate {rate} Hz is not allowed; allowed: 1 to 1000000 Hz', exitCode: 3 },
  TW_ERR_REFERENCE_SILENT: {
    message: '{file}: the reference (channel {channel}) is all zeros from {from} s to {to} s; nothing to analyze (check input.referenceChannel and the sensor)',
    exitCode: 3,
  },
  TW_ERR_OUTPUT_WRITE: { message: 'cannot write {file}: {reason}', exitCode: 4 },
  TW_ERR_AUDIO_UNAVAILABLE: { message: 'audio I/O is unavailable: {reason}', exitCode: 5 },
  TW_ERR_AUDIO_DEVICE: { message: 'audio device {device}: {reason}', exitCode: 5 },
  TW_ERR_HTTP_LISTEN: { message: 'cannot listen on {address}: {reason}', exitCode: 6 },
  TW_ERR_AUTH_NOT_CONFIGURED: {
    message: 'control is disabled: no token is configured (set control.tokenFile or TAPWARDEN_CONTROL_TOKEN)',
    exitCode: 1,
    httpStatus: 403,
  },
  TW_ERR_AUTH_TOKEN: { message: 'a valid bearer token is required for control routes', exitCode: 1, httpStatus: 401 },
  TW_ERR_HTTP_BODY: { message: 'bad request: {detail}', exitCode: 1, httpStatus: 400 },
  TW_ERR_HTTP_NOT_FOUND: { message: 'no route {method} {url}', exitCode: 1, httpStatus: 404 },
  TW_ERR_HTTP_BAD_REQUEST: { message: 'the request could not be parsed ({reason}); allowed: HTTP/1.1 with GET, HEAD or POST', exitCode: 1, httpStatus: 400 },
  TW_ERR_ENGINE_FAILED: { message: 'the engine is not running: {reason}', exitCode: 7, httpStatus: 503 },
  TW_ERR_NOT_READY: { message: 'the stream is not running: {reason}', exitCode: 1, httpStatus: 503 },
  TW_ERR_GATE: { message: '{detail}', exitCode: 8 },
  TW_ERR_FREEZE: { message: 'cannot freeze {file}: {detail}', exitCode: 2 },
  TW_ERR_QUEUE: { message: 'cannot reach the queue at {url}: {reason}', exitCode: 9 },
  TW_ERR_INTERNAL: { message: 'internal error: {detail}', exitCode: 70, httpStatus: 500 },
} as const satisfies Record<string, ErrorDef>;

export type ErrorCode = keyof typeof ERRORS;

/** An error meant for the user: one line, a stable code, an exit status. */
export class TapwardenError extends Error {
  readonly exitCode: number;
  readonly httpStatus: number | undefined;

  constructor(
    readonly code: ErrorCode,
    params: Record<string, string | number> = {},
  ) {
    const def: ErrorDef = ERRORS[code];
    super(def.message.replace(/\{(\w+)\}/g, (_, k: string) => String(params[k] ?? `{${k}}`)));
    this.name = 'TapwardenError';
    this.exitCode = def.exitCode;
    this.httpStatus = def.httpStatus;
  }
}

/** A value as an error line quotes it: JSON, cut to about 80 characters. */
export function quote(value: unknown, max = 80): string {
  const text = JSON.stringify(value) ?? String(value);
  return text.length <= max ? text : `${text.slice(0, max - 1)}…`;
}

/**
 * Warnings tapwarden prints on purpose: a stable code and what it is about. Like errors, each is
 * one line (`tapwarden: warning: ... [CODE]`) and documented in README.md.
 */
export const WARNINGS = {
  TW_WARN_CONFIG_YAML: 'a YAML construct the config reader ignores or reads loosely',
  TW_WARN_INPUT: 'something odd about the input recording (a damaged header, a short file)',
  TW_WARN_OUTPUT: 'something odd about the written outputs (clipped or non-finite samples)',
  TW_WARN_STEP: 'an LMS step above the Gaussian-input mean-square bound 2/(3 tr R)',
} as const;

export type WarningCode = keyof typeof WARNINGS;

/** A warning with its code, as summaries carry them. */
export interface Warning {
  readonly code: WarningCode;
  readonly message: string;
}

/** A warning as one line. */
export function warningLine(code: WarningCode, message: string): string {
  return `tapwarden: warning: ${oneLine(message)} [${code}]`;
}

/** A one-line description of any thrown value, for places that must not print a stack. */
export function oneLine(err: unknown): string {
  const text = err instanceof Error ? err.message : String(err);
  return text.split('\n')[0]!.trim();
}
