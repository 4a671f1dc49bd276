import type { AdaptiveSpec } from '../dsp/types.js';

/** The applied configuration. config/default.yaml holds every default. */
export interface Config {
  readonly input: {
    readonly referenceChannel: number;
    /** Several references, one filter each on every measurement channel (null: referenceChannel alone). */
    readonly referenceChannels: readonly number[] | null;
    readonly desiredChannel: number;
    /** Several measurement channels, each with its own dual path (null: desiredChannel alone). */
    readonly desiredChannels: readonly number[] | null;
  };
  /** The kernel's spec (every key set) and the engine's noise injection. */
  readonly filter: Required<AdaptiveSpec> & { readonly noiseInjectionDb: number | null; readonly noiseSeed: number };
  readonly supervisor: {
    readonly windowSeconds: number;
    readonly minCancellationDb: number;
    readonly maxWeightMean: number;
    readonly marginDb: number;
    readonly passesRequired: number;
    readonly rollbackAfter: number | null;
    readonly crossfadeSeconds: number;
    readonly minReferencePowerDb: number | null;
  };
  readonly output: { readonly signal: 'error' | 'estimate'; readonly encoding: OutputEncoding };
  readonly stream: {
    readonly source: 'file' | 'device';
    readonly file: string | null;
    readonly pace: 'realtime' | 'free';
    readonly loop: boolean;
    readonly blockFrames: number;
    readonly queueBlocks: number;
    /** Engine threads the measurement channels are spread over (serve). */
    readonly workers: number;
    readonly device: {
      readonly input: string | number | null;
      readonly sampleRate: number;
      readonly channels: number;
      readonly playback: string | number | null;
      readonly playbackPeakDb: number;
      readonly retrySeconds: number;
    };
  };
  readonly http: { readonly host: string; readonly port: number };
  readonly feed: {
    readonly intervalSeconds: number;
    readonly maxClients: number;
    readonly clientBufferBytes: number;
    readonly maxMessageBytes: number;
  };
  readonly control: { readonly tokenFile: string | null };
  readonly persistence: { readonly file: string | null; readonly minIntervalSeconds: number };
  readonly capture: {
    readonly dir: string | null;
    readonly secondsBefore: number;
    readonly secondsAfter: number;
    readonly maxFiles: number;
    readonly maxBytes: number;
    readonly triggers: readonly CaptureCause[];
    readonly forecastSeconds: number;
  };
  readonly log: { readonly level: 'fatal' | 'error' | 'warn' | 'info' | 'debug' | 'trace' };
}

export type OutputEncoding = 'float32' | 'pcm16' | 'pcm24';

/** What starts a captured episode: a refused handoff window, a drift-forecast alert, an operator mark. */
export type CaptureCause = 'refused' | 'forecast' | 'mark';
export const CAPTURE_CAUSES: readonly CaptureCause[] = ['refused', 'forecast', 'mark'];

const int = (minimum: number, maximum: number) => ({ type: 'integer', minimum, maximum });
const num = (minimum: number, maximum: number) => ({ type: 'number', minimum, maximum });
const nullable = (s: Record<string, unknown>) => ({ ...s, type: [s['type'], 'null'] });
const deviceRef = { type: ['string', 'integer', 'null'], minLength: 1, minimum: 0 };
const section = (properties: Record<string, unknown>) => ({
  type: 'object',
  additionalProperties: false,
  required: Object.keys(properties),
  properties,
});

/** The most measurement channels one run takes (input.desiredChannels). */
export const MAX_MEASUREMENT_CHANNELS = 16;

/** The most references one filter takes (input.referenceChannels). */
export const MAX_REFERENCE_CHANNELS = 8;

/** The reference channels, in the configured order (the filters' order in the weights). */
export function referenceChannels(config: Pick<Config, 'input'>): readonly number[] {
  return config.input.referenceChannels ?? [config.input.referenceChannel];
}

/** The measurement channels a run cleans, in the configured order. */
export function measurementChannels(config: Pick<Config, 'input'>): readonly number[] {
  return config.input.desiredChannels ?? [config.input.desiredChannel];
}

/**
 * The measurement channels' groups, one per engine thread (stream.workers): contiguous and as
 * even as they can be, as indices into measurementChannels; the first group's thread owns the input.
 */
export function channelGroups(config: Pick<Config, 'input' | 'stream'>): number[][] {
  const m = measurementChannels(config).length;
  const w = Math.min(config.stream.workers, m);
  return Array.from({ length: w }, (_, g) => Array.from({ length: Math.floor(((g + 1) * m) / w) - Math.floor((g * m) / w) }, (_, i) => Math.floor((g * m) / w) + i));
}

/** The validator's options, shared by the build-time code generator (scripts/build-validator.mjs). */
export const AJV_OPTIONS = { allErrors: false, strict: true, allowUnionTypes: true } as const;

/** JSON Schema (draft 2020-12 subset) of the configuration; every key required after merge. */
/** The pbfdaf partition lengths filter.blockSize allows. */
export const PBFDAF_BLOCK_SIZES = [16, 32, 64, 128, 256, 512, 1024, 2048, 4096] as const;

export const configSchema = section({
  input: section({
    referenceChannel: int(0, 255),
    referenceChannels: { type: ['array', 'null'], items: int(0, 255), minItems: 1, maxItems: MAX_REFERENCE_CHANNELS, uniqueItems: true },
    desiredChannel: int(0, 255),
    desiredChannels: { type: ['array', 'null'], items: int(0, 255), minItems: 1, maxItems: MAX_MEASUREMENT_CHANNELS, uniqueItems: true },
  }),
  filter: section({
    algorithm: { enum: ['lms', 'nlms', 'pbfdaf'] },
    taps: int(1, 65536),
    step: { type: 'number', exclusiveMinimum: 0, maximum: 1000 },
    delta: num(0, 1000),
    leak: { type: 'number', minimum: 0, exclusiveMaximum: 1 },
    leakShift: nullable(int(1, 31)),
    meanRemovalEvery: nullable(int(1, 1e9)),
    noiseInjectionDb: nullable(num(-200, 0)),
    noiseSeed: int(0, 4294967295),
    arithmetic: { enum: ['float64', 'float32', 'q15', 'q31'] },
    rounding: { enum: ['nearest', 'truncate'] },
    weightLimit: { type: 'number', exclusiveMinimum: 0, maximum: 1e30 },
    blockSize: { enum: [...PBFDAF_BLOCK_SIZES] },
    constrained: { type: 'boolean' },
  }),
  supervisor: section({
    windowSeconds: num(0.001, 3600),
    minCancellationDb: num(-200, 200),
    maxWeightMean: { type: 'number', exclusiveMinimum: 0, maximum: 1e30 },
    marginDb: num(0, 200),
    passesRequired: int(1, 1e6),
    rollbackAfter: nullable(int(1, 1e6)),
    crossfadeSeconds: num(0, 3600),
    minReferencePowerDb: nullable(num(-200, 200)),
  }),
  output: section({
    signal: { enum: ['error', 'estimate'] },
    encoding: { enum: ['float32', 'pcm16', 'pcm24'] },
  }),
  stream: section({
    source: { enum: ['file', 'device'] },
    file: { type: ['string', 'null'], minLength: 1 },
    pace: { enum: ['realtime', 'free'] },
    loop: { type: 'boolean' },
    blockFrames: int(16, 65536),
    queueBlocks: int(2, 4096),
    workers: int(1, MAX_MEASUREMENT_CHANNELS),
    device: section({
      input: deviceRef,
      sampleRate: int(1000, 384000),
      channels: int(1, 64),
      playback: deviceRef,
      playbackPeakDb: num(-120, 0),
      retrySeconds: num(0.1, 3600),
    }),
  }),
  http: section({
    host: { type: 'string', minLength: 1 },
    port: int(0, 65535),
  }),
  feed: section({
    intervalSeconds: num(0.01, 60),
    maxClients: int(0, 1000),
    clientBufferBytes: int(1024, 1 << 30),
    maxMessageBytes: int(16, 1 << 20),
  }),
  control: section({ tokenFile: { type: ['string', 'null'], minLength: 1 } }),
  persistence: section({
    file: { type: ['string', 'null'], minLength: 1 },
    minIntervalSeconds: num(0, 86400),
  }),
  capture: section({
    dir: { type: ['string', 'null'], minLength: 1 },
    secondsBefore: num(0.1, 3600),
    secondsAfter: num(0, 3600),
    maxFiles: int(1, 1e6),
    maxBytes: int(1 << 20, Number.MAX_SAFE_INTEGER),
    triggers: { type: 'array', items: { enum: [...CAPTURE_CAUSES] }, uniqueItems: true },
    forecastSeconds: num(1, 1e9),
  }),
  log: section({ level: { enum: ['fatal', 'error', 'warn', 'info', 'debug', 'trace'] } }),
});
