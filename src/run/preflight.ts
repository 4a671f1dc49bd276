import { autocorrelationFft, toeplitzLambdaMax } from '../analysis/correlation.js';
import type { Config } from '../config/schema.js';
import { lmsStepBounds } from '../dsp/bounds.js';
import { INPUT_LIMIT } from '../dsp/level.js';
import { TapwardenError } from '../errors.js';
import type { WavReader } from '../io/wav/reader.js';

/**
 * Checks a run makes before its first sample: the configured channels exist in the source, and
 * an LMS step is inside the stability bounds of this recording's reference. They belong to the
 * run layer, so replay, serve and sweeps apply the same ones.
 */

/** Seconds of the loudest stretch of reference the LMS bounds are computed from. */
export const STEP_SCAN_SECONDS = 10;

/** Throws TW_ERR_WAV_CHANNEL unless every configured channel exists. */
export function checkChannels(channels: number, config: Config, file: string): void {
  const { input } = config;
  const wanted: [string, number][] =
    input.referenceChannels === null ? [['input.referenceChannel', input.referenceChannel]] : input.referenceChannels.map((c, i) => [`input.referenceChannels[${i}]`, c]);
  if (input.desiredChannels === null) wanted.push(['input.desiredChannel', input.desiredChannel]);
  else input.desiredChannels.forEach((c, i) => wanted.push([`input.desiredChannels[${i}]`, c]));
  for (const [key, value] of wanted) {
    if (value >= channels) throw new TapwardenError('TW_ERR_WAV_CHANNEL', { file, channels, last: channels - 1, key, value });
  }
}

/** Frames [from, to) of a recording. */
export interface FrameRange {
  readonly from: number;
  readonly to: number;
}

/** The reference figures the LMS bounds come from. */
export interface ReferenceScan {
  /** The loudest STEP_SCAN_SECONDS of the reference (whole seconds), sanitized as the engine would. */
  readonly samples: Float64Array;
  readonly startSeconds: number;
}

/**
 * Reads the reference over `range` once, in one-second power bins, and returns the loudest
 * STEP_SCAN_SECONDS-long stretch: a step that is stable there is stable everywhere, if the
 * reference is stationary within the stretch. The reader is left at range.from.
 */
export function scanReference(reader: WavReader, channel: number, range: FrameRange): ReferenceScan {
  const rate = reader.format.sampleRate;
  const second = Math.max(1, Math.round(rate));
  const span = Math.min(range.to - range.from, STEP_SCAN_SECONDS * second);
  const seconds = Math.ceil((range.to - range.from) / second);
  const power = new Float64Array(seconds);
  const buf = new Float64Array(second);
  reader.seek(range.from);
  for (let s = 0; s < seconds; s++) {
    const n = reader.read([channel], [buf.subarray(0, Math.min(second, range.to - range.from - s * second))]);
    let p = 0;
    for (let i = 0; i < n; i++) p += sanitize(buf[i]!) ** 2;
    power[s] = p;
  }
  const width = Math.ceil(span / second);
  let best = 0;
  let bestPower = -1;
  for (let s = 0; s + width <= seconds; s++) {
    let p = 0;
    for (let k = s; k < s + width; k++) p += power[k]!;
    if (p > bestPower) {
      bestPower = p;
      best = s;
    }
  }
  const samples = new Float64Array(span);
  reader.seek(range.from + best * second);
  const n = reader.read([channel], [samples]);
  for (let i = 0; i < n; i++) samples[i] = sanitize(samples[i]!);
  reader.seek(range.from);
  return { samples: samples.subarray(0, n), startSeconds: (range.from + best * second) / rate };
}

/** The scan of every reference channel, in order (a multiple-input LMS checks all of them). */
export function scanReferences(reader: WavReader, channels: readonly number[], range: FrameRange): ReferenceScan[] {
  return channels.map((c) => scanReference(reader, c, range));
}

/** A sample as the engine sees it: non-finite -> 0, clamped to the input range. */
function sanitize(v: number): number {
  if (!(v - v === 0)) return 0;
  return v > INPUT_LIMIT ? INPUT_LIMIT : v < -INPUT_LIMIT ? -INPUT_LIMIT : v;
}

/**
 * LMS step bounds on these references: a step at or above the mean-square bound 2/tr(R + leak I)
 * is refused (TW_ERR_CONFIG_STEP_BOUND, naming both bounds and the figures); one above the
 * Gaussian-input bound 2/(3 tr(R + leak I)) is returned as a warning. With K references R is the
 * stacked regressor's: its trace is the references' traces summed (exact), and the sum of their
 * largest eigenvalues bounds its largest (docs/REFERENCES.md, "Multiple-input LMS/NLMS"). NLMS
 * and pbfdaf have static bounds, checked with the config.
 */
export function checkLmsStep(scans: readonly ReferenceScan[], config: Config, configFile: string, rate: number): string[] {
  const { algorithm, taps, step, leak } = config.filter;
  if (algorithm !== 'lms' || scans.every((s) => s.samples.length === 0)) return [];
  const each = scans.map((scan) => {
    const r = autocorrelationFft(scan.samples, taps);
    return { scan, power: r[0]!, lambdaMax: toeplitzLambdaMax(r) };
  });
  const lambdaMax = each.reduce((a, x) => a + x.lambdaMax, 0);
  const traceR = each.reduce((a, x) => a + taps * x.power, 0);
  const b = lmsStepBounds(lambdaMax, traceR, taps * scans.length, leak);
  const where = (scan: ReferenceScan) => `the loudest ${(scan.samples.length / rate).toFixed(1)} s of the reference, from ${scan.startSeconds.toFixed(1)} s`;
  const figures =
    scans.length === 1
      ? `tr R = ${traceR.toPrecision(4)} (${taps} taps x power ${each[0]!.power.toPrecision(4)}), lambda_max = ${lambdaMax.toPrecision(4)}, over ${where(scans[0]!)}`
      : `tr R = ${traceR.toPrecision(4)} (${taps} taps x the ${scans.length} references' powers ${each.map((x) => x.power.toPrecision(4)).join(' + ')}), lambda_max <= ${lambdaMax.toPrecision(4)} (their lambda_max summed), each over its loudest ${(scans[0]!.samples.length / rate).toFixed(1)} s`;
  if (!(step < b.meanSquare)) {
    throw new TapwardenError('TW_ERR_CONFIG_STEP_BOUND', {
      file: configFile,
      step,
      bound: b.meanSquare.toPrecision(4),
      meanBound: b.mean.toPrecision(4),
      figures,
    });
  }
  if (step >= b.gaussian) {
    return [
      `filter.step = ${step} is above 2/(3 tr(R + leak I)) = ${b.gaussian.toPrecision(4)}, the mean-square bound for Gaussian input (below 2/tr(R + leak I) = ${b.meanSquare.toPrecision(4)}); ${figures}`,
    ];
  }
  return [];
}
