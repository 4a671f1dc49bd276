import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { CorrelationAccumulator, stretchCovariance } from '../../analysis/correlation.js';
import { analyzeExcitation, type ExcitationAnalysis } from '../../analysis/excitation.js';
import { DbHistogram } from '../../analysis/histogram.js';
import { WelchCross, WelchPsd, bandBounds, spectrumSegment } from '../../analysis/welch.js';
import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { measurementChannels, referenceChannels } from '../../config/schema.js';
import { INPUT_LIMIT, powerDb } from '../../dsp/level.js';
import { TapwardenError, oneLine, quote, warningLine } from '../../errors.js';
import { makeDirectory } from '../../io/files.js';
import { WavReader } from '../../io/wav/reader.js';
import { framesOf, writeJsonAtomic } from '../../replay/replay.js';
import { checkChannels } from '../../run/preflight.js';
import type { Command } from '../command.js';
import { seconds } from '../options.js';

/** Seconds of fault-free windows the correlation matrices are estimated from. */
const CORRELATION_SECONDS = 60;
/** Largest L for the eigen-decomposition (O(L^3)). */
const MAX_TAPS = 2048;
/** A window whose desired power is this far above the median is a fault (a loose connector, a hit) and left out. */
const FAULT_DB = 6;
/**
 * A leak is suggested only if it keeps the cancellation of every supervisor window (each its own
 * R and p): the replay judges windows, and a leak that costs nothing on average can cost a lot in
 * the quiet windows where cancellation is deepest. Each window costs an O(L^3) eigen-
 * decomposition, so at most SEGMENT_WINDOWS windows, evenly spread, and only up to
 * SEGMENT_MAX_TAPS taps; longer filters are judged over the whole selection.
 */
const SEGMENT_WINDOWS = 240;
const SEGMENT_MAX_TAPS = 128;

/** A sample as the engine sees it, and whether it was bad. */
function clean(v: number): number {
  if (!(v - v === 0)) return 0;
  return v > INPUT_LIMIT ? INPUT_LIMIT : v < -INPUT_LIMIT ? -INPUT_LIMIT : v;
}

/** Per octave band: the reference-measurement coherence and the cancellation it bounds. */
export type CoherenceBands = ReturnType<typeof bandBounds>;

interface Selection {
  readonly analysis: ExcitationAnalysis & { windowsUsed: number; windowsExcluded: number; faultDb: number };
  readonly coherence: { segmentLength: number; segments: number; bands: CoherenceBands };
  readonly spectrum: { frequencies: Float64Array; psd: Float64Array };
  readonly rate: number;
  readonly durationSeconds: number;
  readonly fromSeconds: number;
  readonly warnings: readonly string[];
}

function table(a: Selection['analysis'], s: Selection): string {
  const rows: Array<[string, string]> = [
    ['selection', `${s.fromSeconds.toFixed(1)}-${(s.fromSeconds + s.durationSeconds).toFixed(1)} s at ${s.rate} Hz`],
    ['taps', String(a.taps)],
    ['samples used', `${a.samplesUsed} (${(a.samplesUsed / s.rate).toFixed(1)} s in ${a.windowsUsed} windows; ${a.windowsExcluded} faulty windows left out)`],
    ['reference power', `${a.referencePowerDb.toFixed(1)} dB re FS`],
    ['lambda_max', a.lambdaMax.toExponential(3)],
    ['lambda_min', a.lambdaMin.toExponential(3)],
    ['eigenvalue spread', a.eigenvalueSpread === null ? 'unbounded (lambda_min <= 0)' : a.eigenvalueSpread.toExponential(2)],
    [`unexcited directions (< ${a.thresholdDb} dB re lambda_max)`, `${a.unexcitedDirections} of ${a.taps}`],
    ['weight-mean direction excitation', `${a.meanDirectionDb.toFixed(1)} dB re lambda_max`],
    [
      `bands with no energy (< ${a.thresholdDb} dB re peak)`,
      a.unexcitedBands.length ? a.unexcitedBands.map((b) => `${b.loHz.toFixed(0)}-${b.hiHz.toFixed(0)} Hz`).join(', ') : 'none',
    ],
    ['LMS mean bound 2/(lambda_max + leak)', a.stepBounds.lms.toPrecision(4)],
    ['LMS mean-square bound 2/tr(R + leak I)', a.stepBounds.lmsTraceBound.toPrecision(4)],
    ['NLMS step bound', `0 < step < ${a.stepBounds.nlms}`],
  ];
  if (a.leak) {
    rows.push([
      `suggested leak (cancellation loss <= ${a.leak.maxLossDb} dB)`,
      a.leak.suggested === null ? 'none qualifies' : `${a.leak.suggested.toExponential(2)} re R, filter.leak ${a.leak.suggestedConfig!.toExponential(2)} for ${a.leak.algorithm}`,
    ]);
    for (const c of a.leak.candidates) {
      rows.push([
        `  leak ${c.leak.toExponential(2)} (filter.leak ${c.configLeak.toExponential(2)})`,
        `bias ${(100 * c.relativeBias).toFixed(2)} %, cancellation ${c.cancellationDb.toFixed(1)} dB (loss ${c.lossDb.toFixed(2)} dB, worst window ${c.worstSegmentLossDb.toFixed(2)} dB)`,
      ]);
    }
  }
  for (const b of s.coherence.bands) {
    if (b.coherence === null) continue;
    rows.push([
      `  ${b.centreHz >= 1000 ? `${b.centreHz / 1000} k` : `${b.centreHz} `}Hz octave`,
      `coherence ${b.coherence.toFixed(3)}, cancellation bound ${b.boundDb!.toFixed(1)} dB`,
    ]);
  }
  const w = Math.max(...rows.map(([k]) => k.length));
  return rows.map(([k, v]) => `${k.padEnd(w)}  ${v}`).join('\n');
}

export const analyze: Command = {
  summary: "analyze a recording's reference: spectrum, eigenvalues, unexcited bands, step bounds, leak",
  usage: `Usage: tapwarden analyze REC.wav [--taps N] [--config FILE] [--channel N] [--threshold-db DB]
                         [--from SECONDS] [--to SECONDS] [--out DIR]

Excitation analysis of the reference channel for an N-tap filter: Welch power spectrum; the
eigenvalues of the N x N autocorrelation matrix, their spread and how many fall below the
threshold relative to lambda_max (directions the input does not excite); the bands with no energy;
the LMS and NLMS step bounds; per octave band, the coherence of reference and measurement and the
cancellation it bounds, -10 log10(1 - coherence); and, from the desired channel, a suggested leak with the predicted
bias of (R + leak I)^-1 p against the unregularized solution: the largest whose predicted loss
is at most 0.5 dB in every supervisor window (each with its own R and p; up to ${SEGMENT_MAX_TAPS} taps).
R and p come from up to
${CORRELATION_SECONDS} s of supervisor windows from --from on, leaving out windows whose desired
power is over ${FAULT_DB} dB above the median (faults) or that hold non-finite or out-of-range samples;
the spectrum from the whole selection. Prints a table and writes DIR/analysis.json and
DIR/report.html.

Options:
  --taps N           filter length (default: filter.taps of the config), at most ${MAX_TAPS}
  --config FILE      YAML overriding config/default.yaml (channels, window, leak, algorithm)
  --channel N        the measurement channel the coherence and the leak are for (one of the
                     config's; default: its first). The reference is the config's first.
  --threshold-db DB  what counts as unexcited, dB below the peak (default -60)
  --from SECONDS     start this far into the recording (default 0)
  --to SECONDS       stop here (default: the end)
  --out DIR          output directory (default: tapwarden-analysis)
  -h, --help         this help`,
  options: {
    taps: { type: 'string' },
    config: { type: 'string' },
    channel: { type: 'string' },
    'threshold-db': { type: 'string' },
    from: { type: 'string' },
    to: { type: 'string' },
    out: { type: 'string', default: 'tapwarden-analysis' },
  },
  positionals: [1, 1],
  async run(values, positionals) {
    const recording = positionals[0]!;
    const configFile = values['config'] as string | undefined;
    const config = loadConfig(configFile);
    const taps = values['taps'] === undefined ? config.filter.taps : Number(values['taps']);
    if (!Number.isInteger(taps) || taps < 1 || taps > MAX_TAPS) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `analyze: --taps ${quote(values['taps'])} is not allowed; allowed: an integer 1..${MAX_TAPS}` });
    }
    const thresholdDb = values['threshold-db'] === undefined ? -60 : Number(values['threshold-db']);
    if (!(thresholdDb < 0)) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `analyze: --threshold-db ${quote(values['threshold-db'])} is not allowed; allowed: a negative number of dB` });
    }
    const range = { fromSeconds: seconds('analyze', 'from', values['from']), toSeconds: seconds('analyze', 'to', values['to']) };
    const measured = measurementChannels(config);
    const channel = values['channel'] === undefined ? measured[0]! : Number(values['channel']);
    if (!measured.includes(channel)) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `analyze: --channel ${quote(values['channel'])} is not allowed; allowed: a measurement channel of the config (${measured.join(', ')})` });
    }
    const outDir = values['out'] as string;
    const sel = select(recording, config, channel, taps, thresholdDb, range);
    for (const w of sel.warnings) process.stderr.write(warningLine('TW_WARN_INPUT', w) + '\n');
    const a = sel.analysis;
    makeDirectory(outDir);
    const { renderReport } = await import('../../report/html.js');
    try {
      writeFileSync(
        join(outDir, 'report.html'),
        renderReport({
          recording,
          durationSeconds: sel.durationSeconds,
          sampleRate: sel.rate,
          summaries: [],
          figures: [],
          gate: null,
          spectrum: { frequencies: Array.from(sel.spectrum.frequencies), psd: Array.from(sel.spectrum.psd) },
          analysis: a,
        }),
      );
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: outDir, reason: oneLine(err) });
    }
    writeJsonAtomic(join(outDir, 'analysis.json'), {
      recording,
      sampleRate: sel.rate,
      range: { fromSeconds: sel.fromSeconds, toSeconds: sel.fromSeconds + sel.durationSeconds },
      config: configFile ?? DEFAULT_CONFIG_PATH,
      warnings: sel.warnings,
      channel,
      ...a,
      coherence: sel.coherence,
      spectrum: { frequencies: Array.from(sel.spectrum.frequencies), psd: Array.from(sel.spectrum.psd) },
    });
    process.stdout.write(table(a, sel) + `\nwritten     ${outDir}/analysis.json, report.html\n`);
    return 0;
  },
};

/**
 * Two passes over the selection: the spectrum and each window's desired power and faults, then
 * the correlations over the windows kept.
 */
function select(recording: string, config: ReturnType<typeof loadConfig>, channel: number, taps: number, thresholdDb: number, seconds: { fromSeconds?: number; toSeconds?: number }): Selection {
  const reader = WavReader.open(recording);
  try {
    checkChannels(reader.format.channels, config, recording);
    const rate = reader.format.sampleRate;
    const range = framesOf(seconds, reader.frames, rate, recording);
    const win = Math.max(1, Math.round(config.supervisor.windowSeconds * rate));
    const windows = Math.ceil((range.to - range.from) / win);
    const desiredDb = new Float64Array(windows);
    const faulty = new Uint8Array(windows);
    const psd = new WelchPsd(spectrumSegment(rate), rate);
    const x = new Float64Array(win);
    const d = new Float64Array(win);
    // The first reference, and the measurement channel asked for (README "analyze").
    const channels = [referenceChannels(config)[0]!, channel];
    const median = new DbHistogram();
    let referenceEnergy = 0;
    reader.seek(range.from);
    for (let w = 0; w < windows; w++) {
      const n = reader.read(channels, [x.subarray(0, Math.min(win, range.to - range.from - w * win)), d]);
      let pd = 0;
      for (let i = 0; i < n; i++) {
        const xv = clean(x[i]!);
        const dv = clean(d[i]!);
        if (xv !== x[i] || dv !== d[i]) faulty[w] = 1;
        x[i] = xv;
        referenceEnergy += xv * xv;
        pd += dv * dv;
      }
      psd.push(x, n);
      desiredDb[w] = powerDb(pd / Math.max(1, n));
      if (!faulty[w]) median.add(desiredDb[w]!);
    }
    if (referenceEnergy === 0) {
      throw new TapwardenError('TW_ERR_REFERENCE_SILENT', {
        file: recording,
        channel: referenceChannels(config)[0]!,
        from: (range.from / rate).toFixed(1),
        to: (range.to / rate).toFixed(1),
      });
    }
    const typical = median.quantile(0.5) ?? -Infinity;
    for (let w = 0; w < windows; w++) if (desiredDb[w]! > typical + FAULT_DB) faulty[w] = 1;
    const acc = new CorrelationAccumulator(taps);
    const cross = new WelchCross(spectrumSegment(rate), rate);
    const segments: Array<ReturnType<typeof stretchCovariance>> = [];
    const keptWindows = Math.min(windows - faulty.reduce((a, b) => a + b, 0), Math.ceil((CORRELATION_SECONDS * rate) / win));
    const every = Math.max(1, Math.ceil(keptWindows / SEGMENT_WINDOWS));
    const keepSamples = CORRELATION_SECONDS * rate;
    let kept = 0;
    let used = 0;
    let excluded = 0;
    // The last taps - 1 reference samples before the current window.
    const prev = new Float64Array(Math.max(1, taps - 1));
    reader.seek(range.from);
    for (let w = 0; w < windows && kept < keepSamples; w++) {
      const n = reader.read(channels, [x.subarray(0, Math.min(win, range.to - range.from - w * win)), d]);
      for (let i = 0; i < n; i++) {
        x[i] = clean(x[i]!);
        d[i] = clean(d[i]!);
      }
      const keep = !faulty[w];
      acc.push(x, d, n, keep);
      if (keep) cross.push(x, d, n);
      if (keep && taps <= SEGMENT_MAX_TAPS && used % every === 0 && n === win) {
        // The window alone, its x[i-k] reaching back into the previous window.
        const withHistory = new Float64Array(taps - 1 + n);
        withHistory.set(prev.subarray(prev.length - (taps - 1)));
        withHistory.set(x.subarray(0, n), taps - 1);
        segments.push(stretchCovariance(withHistory, d.subarray(0, n), taps));
      }
      prev.copyWithin(0, n);
      prev.set(x.subarray(Math.max(0, n - prev.length), n), Math.max(0, prev.length - n));
      if (keep) {
        kept += n;
        used++;
      } else excluded++;
    }
    const spectrum = psd.result();
    const correlations = acc.result();
    const f = config.filter;
    const leakScale = f.algorithm === 'lms' ? 1 : 1 / (f.delta + taps * correlations.r[0]!);
    const analysis = analyzeExcitation({
      correlations,
      segments,
      withDesired: correlations.n > 0,
      taps,
      leak: f.leak,
      algorithm: f.algorithm,
      leakScale,
      thresholdDb,
      maxLossDb: 0.5,
      frequencies: spectrum.frequencies,
      psd: spectrum.psd,
    });
    return {
      analysis: { ...analysis, windowsUsed: used, windowsExcluded: excluded, faultDb: FAULT_DB },
      coherence: { segmentLength: cross.segmentLength, segments: cross.segments, bands: bandBounds(cross.result(), rate) },
      spectrum,
      rate,
      durationSeconds: (range.to - range.from) / rate,
      fromSeconds: range.from / rate,
      warnings: reader.warnings,
    };
  } finally {
    reader.close();
  }
}
