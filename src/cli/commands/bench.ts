import { benchEngine, type BenchCase } from '../../bench/engine.js';
import { benchReplay } from '../../bench/replay.js';
import { benchServe } from '../../bench/serve.js';
import { PORT_FLAGS, runPortReference } from '../../bench/portReference.js';
import { C_FLAGS, buildCReference, numpyAvailable, runCReference, runNumpyReference, type ReferenceResult } from '../../bench/references.js';
import { PBFDAF_BLOCK_SIZES } from '../../config/schema.js';
import { ALGORITHMS, ARITHMETICS, type Algorithm, type Arithmetic } from '../../dsp/types.js';
import { TapwardenError } from '../../errors.js';
import type { Command } from '../command.js';

const DEFAULT_TAPS = [64, 256, 1024, 4096];
const DEFAULT_ROWS: Array<Pick<BenchCase, 'algorithm' | 'arithmetic' | 'constrained'>> = [
  { algorithm: 'nlms', arithmetic: 'float64' },
  { algorithm: 'nlms', arithmetic: 'q15' },
  { algorithm: 'nlms', arithmetic: 'q31' },
  { algorithm: 'nlms', arithmetic: 'float32' },
  { algorithm: 'pbfdaf', arithmetic: 'float64', constrained: false },
  { algorithm: 'pbfdaf', arithmetic: 'float64', constrained: true },
];

function choice<T extends string>(key: string, value: string | undefined, allowed: readonly T[]): T | undefined {
  if (value === undefined) return undefined;
  if (!allowed.includes(value as T)) throw new TapwardenError('TW_ERR_USAGE', { detail: `bench: --${key} ${value} is not allowed; allowed: ${allowed.join(', ')}` });
  return value as T;
}

/** The median of a list (the middle value, or the mean of the two middle ones). */
function median(v: readonly number[]): number {
  const s = [...v].sort((a, b) => a - b);
  const m = s.length >> 1;
  return s.length % 2 ? s[m]! : (s[m - 1]! + s[m]!) / 2;
}

function positive(key: string, value: string | undefined, fallback: number, integer: boolean): number {
  if (value === undefined) return fallback;
  const v = Number(value);
  if (!(v > 0) || (integer && !Number.isInteger(v))) {
    throw new TapwardenError('TW_ERR_USAGE', { detail: `bench: --${key} ${value} is not allowed; allowed: a positive ${integer ? 'integer' : 'number'}` });
  }
  return v;
}

/**
 * The pbfdaf block size the bench uses: the largest power of two up to min(2048, L/2) that divides
 * L, at least 16 (latency N samples); null when there is none.
 */
function blockFor(taps: number): number | null {
  for (let n = 2048; n >= 16; n /= 2) if (n <= Math.max(16, taps / 2) && taps % n === 0) return n;
  return null;
}

export const bench: Command = {
  summary: "measure the engine's throughput on this machine, beside a C reference",
  usage: `Usage: tapwarden bench [--algorithm A] [--taps N] [--arithmetic X] [--block-size N] [--constrained true|false]
                       [--channels N] [--replay] [--serve] [--rate HZ] [--seconds S] [--repeat N] [--json]

Runs the whole dual path (adaptive and clean filters, statistics, supervisor) on synthetic data
and reports samples per second and the real-time factor at the given rate. With no algorithm,
taps or arithmetic it prints a table over 64, 256, 1024 and 4096 taps for NLMS in float64, q15
q31 and float32 and for the partitioned frequency-domain filter. NLMS float64 rows also run the C
reference (bench/c, built with ${C_FLAGS.join(' ')} when a compiler is present) and, where
python3 has numpy, the per-sample numpy script (bench/numpy_nlms.py), in the same run. q15, q31
and float32 rows run the C port 'tapwarden freeze' generates (the same operator sequence, built
with ${PORT_FLAGS.join(' ')}), after checking it reproduces tapwarden bit for bit.

Options:
  --algorithm A   lms, nlms or pbfdaf
  --taps N        filter length
  --arithmetic X  float64, float32, q15 or q31
  --block-size N  pbfdaf partition length (default: the largest power of two up to min(2048, L/2) dividing L)
  --constrained B pbfdaf: true or false (default: both rows in the table, true for one case)
  --repeat N      measure each row N times; figures are medians, with the range (default 1)
  --channels N    run N dual paths (N measurement channels) on the one core: x real time is for
                  all of them together (above 1: the core keeps up with N); no references then
  --replay        also replay a synthetic recording of the same length end to end (decode,
                  outputs, decision log, spectra, summary) with the same config, each repeat
                  beside the engine-only run, and print the engine-only / replay ratio
  --serve         also run 'tapwarden serve' on a looped synthetic recording at --rate, paced in
                  real time, with one GET /metrics a second, and print the cores the whole
                  process used over --seconds (after 3 s to settle; Linux /proc)
  --rate HZ       sample rate for the real-time factor (default 48000)
  --seconds S     seconds of audio per measurement (default 3)
  --json          JSON on stdout (an object, or an array for the table)
  -h, --help      this help`,
  options: {
    algorithm: { type: 'string' },
    taps: { type: 'string' },
    arithmetic: { type: 'string' },
    rate: { type: 'string' },
    seconds: { type: 'string' },
    'block-size': { type: 'string' },
    constrained: { type: 'string' },
    repeat: { type: 'string' },
    channels: { type: 'string' },
    json: { type: 'boolean' },
    replay: { type: 'boolean' },
    serve: { type: 'boolean' },
  },
  positionals: [0, 0],
  async run(values) {
    const algorithm = choice<Algorithm>('algorithm', values['algorithm'] as string | undefined, ALGORITHMS);
    const arithmetic = choice<Arithmetic>('arithmetic', values['arithmetic'] as string | undefined, ARITHMETICS);
    const tapsArg = values['taps'] as string | undefined;
    const rate = positive('rate', values['rate'] as string | undefined, 48000, true);
    const seconds = positive('seconds', values['seconds'] as string | undefined, 3, false);
    const repeat = positive('repeat', values['repeat'] as string | undefined, 1, true);
    const channels = positive('channels', values['channels'] as string | undefined, 1, true);
    const blockArg = values['block-size'] as string | undefined;
    const blockSize = blockArg === undefined ? undefined : positive('block-size', blockArg, 0, true);
    const constrainedArg = choice<'true' | 'false'>('constrained', values['constrained'] as string | undefined, ['true', 'false']);
    const single = algorithm !== undefined || arithmetic !== undefined || tapsArg !== undefined;
    const withReplay = values['replay'] === true;
    const withServe = values['serve'] === true;
    for (const [on, flag] of [[withReplay, '--replay'], [withServe, '--serve']] as const) {
      if (on && (!single || channels > 1)) {
        throw new TapwardenError('TW_ERR_USAGE', { detail: `bench: ${flag} is for one case on one channel; allowed: with --algorithm, --taps or --arithmetic, and no --channels` });
      }
    }
    const taps = tapsArg === undefined ? DEFAULT_TAPS : [positive('taps', tapsArg, 0, true)];
    const rows: Array<Pick<BenchCase, 'algorithm' | 'arithmetic' | 'constrained'>> = single
      ? [{ algorithm: algorithm ?? 'nlms', arithmetic: arithmetic ?? 'float64', ...(constrainedArg === undefined ? {} : { constrained: constrainedArg === 'true' }) }]
      : DEFAULT_ROWS;
    if ((blockSize !== undefined || constrainedArg !== undefined) && !rows.every((r) => r.algorithm === 'pbfdaf')) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: 'bench: --block-size and --constrained are for pbfdaf; allowed with --algorithm pbfdaf' });
    }
    if (blockSize !== undefined && (!(PBFDAF_BLOCK_SIZES as readonly number[]).includes(blockSize) || taps.some((L) => L % blockSize !== 0))) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `bench: --block-size ${blockSize} is not allowed; allowed: a power of two from 16 to 4096 that divides --taps` });
    }
    if (rows.some((r) => r.algorithm === 'pbfdaf' && r.arithmetic !== 'float64')) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: 'bench: pbfdaf runs in float64 only' });
    }
    const bad = rows.some((r) => r.algorithm === 'pbfdaf') && blockSize === undefined ? taps.find((L) => blockFor(L) === null) : undefined;
    if (bad !== undefined) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `bench: pbfdaf needs taps divisible by a block size of at least 16; ${bad} is not` });
    }
    const c = rows.some((r) => r.algorithm === 'nlms' && r.arithmetic === 'float64') ? buildCReference() : { skipped: 'not an NLMS float64 case' };
    const numpy = numpyAvailable();
    const json = values['json'] === true;
    const results = [];
    if (!json) {
      process.stdout.write(`tapwarden bench: dual path, ${rate} Hz, ${seconds} s of synthetic audio per row, one core${repeat > 1 ? `, medians of ${repeat} runs` : ''}\n`);
      if ('skipped' in c && single === false) process.stdout.write(`C reference skipped: ${c.skipped}\n`);
      process.stdout.write(`${'algorithm'.padEnd(22)}${'arith'.padEnd(9)}${'taps'.padStart(6)}${'samples/s'.padStart(13)}${'x real time'.padStart(13)}${'C x rt'.padStart(9)}${'tw/C'.padStart(7)}${'numpy x rt'.padStart(12)}${'tw/numpy'.padStart(10)}\n`);
    }
    for (const row of rows) {
      for (const L of taps) {
        const block = blockSize ?? blockFor(L);
        const benchCase = { ...row, taps: L, rate, seconds, channels, blockSize: block ?? 256 };
        // With --replay, each engine-only run has its replay beside it: the machine's drift hits both.
        const replays: number[] = [];
        const runs = Array.from({ length: repeat }, () => {
          const e = benchEngine(benchCase);
          if (withReplay) replays.push(benchReplay(benchCase).realtimeFactor);
          return e;
        });
        const speeds = runs.map((x) => x.samplesPerSecond);
        const served = withServe ? await benchServe(benchCase) : null;
        const r = { ...runs[0]!, samplesPerSecond: median(speeds), realtimeFactor: median(speeds) / rate };
        let cRef: ReferenceResult | null = null;
        let npRef: ReferenceResult | null = null;
        let cSkipped: string | null = null;
        const repeated = (one: () => ReferenceResult | null): ReferenceResult | null => {
          const got = Array.from({ length: repeat }, one).filter((x): x is ReferenceResult => x !== null);
          if (got.length === 0) return null;
          const sps = median(got.map((x) => x.samplesPerSecond));
          return { samplesPerSecond: sps, realtimeFactor: sps / rate };
        };
        if (channels > 1) {
          cSkipped = 'references run one channel; this row runs several';
        } else if (row.algorithm === 'nlms' && row.arithmetic === 'float64') {
          if ('binary' in c) cRef = repeated(() => runCReference(c.binary, L, seconds, rate));
          if (numpy) npRef = runNumpyReference(L, Math.min(seconds, 1), rate);
        } else if (row.algorithm !== 'pbfdaf' && row.arithmetic !== 'float64') {
          let skipped: string | null = null;
          cRef = repeated(() => {
            const p = runPortReference({ ...row, taps: L, rate, seconds });
            if ('skipped' in p) skipped = p.skipped;
            return 'skipped' in p ? null : p;
          });
          cSkipped = cRef === null ? skipped : null;
        }
        const name = (row.algorithm === 'pbfdaf' ? `pbfdaf N=${block} ${row.constrained === false ? 'unconstr.' : 'constr.'}` : row.algorithm) + (channels > 1 ? ` x${channels}` : '');
        const out = {
          algorithm: r.algorithm,
          ...(r.algorithm === 'pbfdaf' ? { blockSize: r.blockSize, constrained: r.constrained } : {}),
          taps: L,
          arithmetic: r.arithmetic,
          rate,
          ...(channels > 1 ? { channels } : {}),
          samplesPerSecond: Math.round(r.samplesPerSecond),
          ...(repeat > 1 ? { repeat, samplesPerSecondRange: [Math.round(Math.min(...speeds)), Math.round(Math.max(...speeds))] } : {}),
          realtimeFactor: +r.realtimeFactor.toFixed(2),
          ...(cRef ? { cSamplesPerSecond: Math.round(cRef.samplesPerSecond), cRealtimeFactor: +cRef.realtimeFactor.toFixed(2), ratioToC: +(r.samplesPerSecond / cRef.samplesPerSecond).toFixed(3) } : {}),
          ...(cSkipped ? { cSkipped } : {}),
          ...(npRef ? { numpyRealtimeFactor: +npRef.realtimeFactor.toFixed(2), ratioToNumpy: +(r.samplesPerSecond / npRef.samplesPerSecond).toFixed(1) } : {}),
          ...(withReplay ? { replayRealtimeFactor: +median(replays).toFixed(2), ratioEngineToReplay: +median(runs.map((e, i) => e.realtimeFactor / replays[i]!)).toFixed(3) } : {}),
          ...(served === null ? {} : { serveCores: 'cores' in served ? +served.cores.toFixed(4) : null, serveSkipped: 'skipped' in served ? served.skipped : null }),
        };
        results.push(out);
        if (!json) {
          const f = (v: number | undefined, d: number) => (v === undefined ? '' : v.toFixed(d));
          process.stdout.write(
            `${name.padEnd(22)}${r.arithmetic.padEnd(9)}${String(L).padStart(6)}${String(out.samplesPerSecond).padStart(13)}${f(out.realtimeFactor, 1).padStart(13)}` +
              `${f(out.cRealtimeFactor, 1).padStart(9)}${f(out.ratioToC, 2).padStart(7)}${f(out.numpyRealtimeFactor, 1).padStart(12)}${f(out.ratioToNumpy, 1).padStart(10)}\n`,
          );
          if (typeof out.serveCores === 'number') process.stdout.write(`serve at ${rate} Hz, one scrape a second: ${out.serveCores.toFixed(3)} core (the whole process, over ${seconds} s)\n`);
          if (typeof out.serveSkipped === 'string') process.stdout.write(`serve not measured: ${out.serveSkipped}\n`);
          if (out.replayRealtimeFactor !== undefined) {
            process.stdout.write(`replay end to end: ${out.replayRealtimeFactor.toFixed(1)} x real time; engine only / replay = ${out.ratioEngineToReplay!.toFixed(2)}${repeat > 1 ? ' (median of the paired runs)' : ''}\n`);
          }
        }
      }
    }
    if (json) process.stdout.write(JSON.stringify(single && results.length === 1 ? results[0] : results) + '\n');
    return 0;
  },
};
