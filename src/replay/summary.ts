import type { Config } from '../config/schema.js';
import type { Warning } from '../errors.js';
import type { BandFigures } from '../run/bands.js';
import type { SummaryFigures } from '../run/summary.js';

/** summary.json: one policy's replay of one recording (README "summary.json"). */
export interface Summary extends Omit<SummaryFigures, 'drift'> {
  tool: string;
  recording: string;
  /** The policy's name (its config file's base name), or "default". */
  policy: string;
  /** The measurement channel (input.desiredChannel, or one of input.desiredChannels). */
  channel: number;
  sampleRate: number;
  samples: number;
  durationSeconds: number;
  /** The part of the recording replayed (--from, --to), seconds. */
  range: { fromSeconds: number; toSeconds: number };
  taps: number;
  /** Output samples lag input samples by this much (pbfdaf: one block). */
  latencySamples: number;
  config: Config;
  /** What was odd about the input, the step or the outputs, each with its code. */
  warnings: Warning[];
  weights: { adaptive: number[]; clean: number[]; cleanVersion: number };
  saturations: { adaptive: { weights: number; signal: number }; clean: { signal: number } };
  nonFiniteSamples: number;
  outOfRangeSamples: number;
  /** The arithmetic's largest |w| and the supervisor's bound on |weight mean|. */
  limits: { weight: number; weightMean: number };
  drift: SummaryFigures['drift'];
  /** Per octave band: coherence bound, achieved clean cancellation, survival of the truth (null with output.signal estimate). */
  bands: BandFigures[] | null;
  /** The --truth recording, or null. */
  truth: string | null;
  /** A captured episode replayed from its runs' live state: its side file, stream start and causes; else null. */
  capture: { file: string; startSeconds: number; causes: { cause: string; channel: number | null; streamSeconds: number; note: string | null }[] } | null;
  outputs: { clean: string; adaptive: string; decisions: string; clippedSamples: number; nonFiniteSamples: number };
  /** Seconds this policy's engine took. */
  engineSeconds: number;
  /** Wall time of the whole replay (decoding, every policy, writing). */
  elapsedSeconds: number;
  /** Seconds of recording replayed per second of wall time. */
  realtimeFactor: number;
}

const fmtDb = (v: number | null): string => (v === null ? 'n/a' : `${v.toFixed(1)} dB`);

/** One line on the weights' drift: when a limit was reached, or when it will be and how sure that is. */
export function describeDrift(s: Pick<Summary, 'drift' | 'limits'>): string {
  const d = s.drift;
  if (d.firstLimitSeconds !== null) return `a tap reached the weight limit ${s.limits.weight.toPrecision(3)} at ${d.firstLimitSeconds.toFixed(1)} s`;
  const f = d.final;
  if (f === null) return 'no forecast (no window completed)';
  const parts: string[] = [];
  if (f.limitEtaSeconds === null) parts.push('no drift toward the weight limit');
  else {
    const hi = f.limitEtaHighSeconds === null ? 'unbounded' : formatSeconds(f.limitEtaHighSeconds);
    parts.push(`tap ${f.limitTap} reaches the weight limit in ~${formatSeconds(f.limitEtaSeconds)} (${formatSeconds(f.limitEtaLowSeconds ?? f.limitEtaSeconds)} to ${hi}) at the current drift`);
  }
  if (d.firstMeanBoundSeconds !== null) parts.push(`|weight mean| passed its bound at ${d.firstMeanBoundSeconds.toFixed(1)} s`);
  else if (f.meanBoundEtaSeconds !== null) parts.push(`|weight mean| reaches its bound in ~${formatSeconds(f.meanBoundEtaSeconds)}`);
  return parts.join('; ');
}

export function formatSeconds(s: number): string {
  if (s < 120) return `${s.toFixed(0)} s`;
  if (s < 7200) return `${(s / 60).toFixed(0)} min`;
  if (s < 172800) return `${(s / 3600).toFixed(1)} h`;
  return `${(s / 86400).toFixed(0)} days`;
}

/** A few lines for a person: what ran, what the supervisor did, how well the output cancels. */
export function formatSummary(s: Summary, outDir: string, withReport = true): string {
  const c = s.config.filter;
  const h = s.handoffs;
  const rejectedBy = Object.entries(h.rejectedBy)
    .filter(([, n]) => n > 0)
    .map(([k, n]) => `${k} ${n}`)
    .join(', ');
  const window = s.config.supervisor.windowSeconds;
  const range = s.range.fromSeconds > 0 || s.range.toSeconds < s.range.fromSeconds + s.durationSeconds - 1e-9 ? ` (${s.range.fromSeconds.toFixed(1)}-${s.range.toSeconds.toFixed(1)} s)` : '';
  const lines = [
    `recording   ${s.recording}: ${s.durationSeconds.toFixed(1)} s at ${s.sampleRate} Hz${range}`,
    ...(s.capture === null
      ? []
      : [
          `capture     resumed from the live runs at stream time ${s.capture.startSeconds.toFixed(3)} s (${s.capture.file}); captured for ${s.capture.causes
            .map((c) => `${c.cause}${c.channel === null ? '' : ` ch${c.channel}`} at ${c.streamSeconds.toFixed(1)} s${c.note ? ` "${c.note}"` : ''}`)
            .join(', ')}`,
        ]),
    `filter      ${c.algorithm} ${c.taps} taps, step ${c.step}, ${c.arithmetic}/${c.rounding}` +
      (c.leak > 0 ? `, leak ${c.leak}` : '') +
      (c.leakShift !== null ? `, leakShift ${c.leakShift}` : '') +
      (c.noiseInjectionDb !== null ? `, noise ${c.noiseInjectionDb} dB` : ''),
  ];
  if (s.windows === 0) {
    lines.push(`windows     none completed: the recording holds ${s.samples} samples, a ${window} s supervisor window needs ${Math.round(window * s.sampleRate)}; no decision was made`);
  } else {
    lines.push(
      `handoffs    ${h.accepted} accepted, ${h.rejected} rejected${rejectedBy ? ` (${rejectedBy})` : ''}, ${h.rollbacks} rollbacks`,
      `clean path  cancellation median ${fmtDb(s.cancellation.clean.medianDb)}, last quarter ${fmtDb(s.cancellation.clean.lastQuarterMedianDb)}`,
    );
  }
  const sat = s.saturations;
  lines.push(
    `saturations weights ${sat.adaptive.weights}; signal adaptive ${sat.adaptive.signal}, clean ${sat.clean.signal}; input non-finite ${s.nonFiniteSamples}, out of range ${s.outOfRangeSamples}`,
    `drift       ${describeDrift(s)}`,
    ...(s.truth !== null && s.bands !== null
      ? [
          `truth       wanted signal survived (SDR per octave): ${
            s.bands
              .filter((b) => b.survivedDb !== null)
              .map((b) => `${b.centreHz >= 1000 ? `${b.centreHz / 1000} kHz` : `${b.centreHz} Hz`} ${b.survivedDb!.toFixed(1)} dB`)
              .join(', ') || 'no band holds the wanted signal'
          }`,
        ]
      : []),
    `speed       ${s.realtimeFactor.toFixed(1)}x real time (wall clock)`,
    `written     ${outDir}/summary.json, decisions.ndjson, clean.wav, adaptive.wav${withReport ? ', report.html' : ''}`,
  );
  return lines.join('\n');
}
