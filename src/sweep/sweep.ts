import { createHash } from 'node:crypto';
import { closeSync, existsSync, openSync, readFileSync, readSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { nearestRank } from '../analysis/histogram.js';
import type { Config } from '../config/schema.js';
import { TapwardenError, oneLine } from '../errors.js';
import { makeDirectory } from '../io/files.js';
import { worseThan, type PolicyFigures, type Verdict } from '../replay/compare.js';
import { writeJsonAtomic } from '../replay/replay.js';
import type { Judgement } from '../run/summary.js';
import { VERSION } from '../version.js';
import { failedBatch, type Batch, type BatchResult, type CellResult, type CellSpec } from './cells.js';
import { MAX_CELLS_WITHOUT_YES, combinations, type Axis, type Scalar } from './grid.js';

export interface SweepOptions {
  readonly recordings: readonly string[];
  readonly base: Config;
  readonly baseFile: string;
  readonly axes: readonly Axis[];
  readonly gate: { readonly config: Config; readonly file: string } | null;
  /** Threads of the local pool. */
  readonly jobs: number;
  /** redis://HOST:PORT to run on a queue instead of the local pool. */
  readonly queue: string | null;
  readonly outDir: string;
  readonly yes: boolean;
  readonly onProgress?: (done: number, total: number) => void;
  readonly onQueued?: (count: number) => void;
}

/** A combination's figures over all its recordings: the worst case and the median. */
export interface Aggregate {
  parameters: Record<string, Scalar>;
  recordings: number;
  failed: number;
  verdict: Verdict | 'failed';
  worst: Figures;
  median: Figures;
  /** With --gate: on which recordings, and how, it is worse than the baseline (empty: not worse). */
  worseThanBaseline: string[] | null;
}

interface Figures {
  healthyShare: number | null;
  cleanCancellationMedianDb: number | null;
  cleanCancellationP5Db: number | null;
  worstBurstSeconds: number | null;
  weightSaturations: number | null;
}

export interface SweepResult {
  cells: CellResult[];
  combinations: Aggregate[];
  best: Aggregate | null;
  cached: number;
  ran: number;
}

const VERDICT_RANK: Record<Verdict | 'failed', number> = { ok: 0, marginal: 1, poor: 2, failed: 3 };

/** SHA-256 of a file's bytes, read in 1 MiB pieces; null when it cannot be read. */
function fileHash(file: string): string | null {
  let fd: number;
  try {
    fd = openSync(file, 'r');
  } catch {
    return null;
  }
  try {
    const h = createHash('sha256');
    const buf = Buffer.alloc(1 << 20);
    for (let n; (n = readSync(fd, buf, 0, buf.length, null)) > 0; ) h.update(buf.subarray(0, n));
    return h.digest('hex');
  } catch {
    return null;
  } finally {
    closeSync(fd);
  }
}

const cellKey = (recording: string, bytes: string, config: Config, judge: Judgement) =>
  createHash('sha256').update(JSON.stringify({ recording, bytes, config, judge: judge.minCancellationDb, version: VERSION })).digest('hex').slice(0, 24);

/** Batches of one recording's cells: `parts` of them, so every thread of the pool has work. */
function split(batch: Batch, parts: number): Batch[] {
  const size = Math.ceil(batch.cells.length / Math.max(1, parts));
  const out: Batch[] = [];
  for (let i = 0; i < batch.cells.length; i += size) out.push({ ...batch, cells: batch.cells.slice(i, i + size) });
  return out;
}

function aggregate(parameters: Record<string, Scalar>, cells: CellResult[], baselines: Map<string, CellResult>, windowSeconds: number, gate: boolean): Aggregate {
  const ok = cells.filter((c) => c.figures !== null).map((c) => c.figures!);
  const pick = (f: (x: NonNullable<CellResult['figures']>) => number | null) => ok.map(f);
  const min = (v: (number | null)[]) => (v.length === 0 ? null : v.reduce((a, b) => ((a ?? -Infinity) <= (b ?? -Infinity) ? a : b)));
  const max = (v: (number | null)[]) => (v.length === 0 ? null : Math.max(...v.map((x) => x ?? 0)));
  const share = pick((f) => f.healthyShare);
  const med = pick((f) => f.cleanCancellationMedianDb);
  const p5 = pick((f) => f.cleanCancellationP5Db);
  const burst = pick((f) => f.worstBurst?.seconds ?? 0);
  const wsat = pick((f) => f.saturations.weights);
  const failed = cells.length - ok.length;
  const verdict = failed > 0 ? 'failed' : ok.reduce<Verdict>((w, f) => (VERDICT_RANK[f.verdict] > VERDICT_RANK[w] ? f.verdict : w), 'ok');
  let worse: string[] | null = null;
  if (gate) {
    worse = [];
    for (const c of cells) {
      const b = baselines.get(c.recording);
      if (c.figures === null || b?.figures == null) continue;
      const reasons = worseThan(c.figures as PolicyFigures, b.figures as PolicyFigures, windowSeconds);
      if (reasons.length > 0) worse.push(`${c.recording}: ${reasons.join('; ')}`);
    }
  }
  return {
    parameters,
    recordings: cells.length,
    failed,
    verdict,
    worst: { healthyShare: min(share), cleanCancellationMedianDb: min(med), cleanCancellationP5Db: min(p5), worstBurstSeconds: max(burst), weightSaturations: max(wsat) },
    median: {
      healthyShare: nearestRank(share, 0.5),
      cleanCancellationMedianDb: nearestRank(med, 0.5),
      cleanCancellationP5Db: nearestRank(p5, 0.5),
      worstBurstSeconds: nearestRank(burst, 0.5),
      weightSaturations: nearestRank(wsat, 0.5),
    },
    worseThanBaseline: worse,
  };
}

/**
 * tapwarden's pick (README "sweep"): among combinations that did not fail and (with a gate) are
 * not worse than the baseline, the best verdict, then the highest worst-case 5th percentile of
 * clean cancellation, then the highest worst-case median.
 */
export function bestOf(all: readonly Aggregate[]): Aggregate | null {
  const first = ranked(all)[0];
  return first !== undefined && eligible(first) ? first : null;
}

const eligible = (a: Aggregate) => a.verdict !== 'failed' && (a.worseThanBaseline === null || a.worseThanBaseline.length === 0);

/** Every combination in the order of the pick's rule, the ones that cannot be picked last. */
export function ranked(all: readonly Aggregate[]): Aggregate[] {
  const v = (x: number | null) => x ?? -Infinity;
  return [...all].sort(
    (a, b) =>
      Number(eligible(b)) - Number(eligible(a)) ||
      VERDICT_RANK[a.verdict] - VERDICT_RANK[b.verdict] ||
      v(b.worst.cleanCancellationP5Db) - v(a.worst.cleanCancellationP5Db) ||
      v(b.worst.cleanCancellationMedianDb) - v(a.worst.cleanCancellationMedianDb),
  );
}

/** Runs (or resumes) a sweep; writes DIR/cells/<key>/{cell,summary}.json as cells finish, then sweep.json. */
export async function sweep(opts: SweepOptions): Promise<SweepResult> {
  const combos = combinations(opts.base, opts.axes, opts.baseFile);
  const judge: Judgement = { minCancellationDb: opts.base.supervisor.minCancellationDb, source: opts.baseFile };
  const total = (combos.length + (opts.gate ? 1 : 0)) * opts.recordings.length;
  if (total > MAX_CELLS_WITHOUT_YES && !opts.yes) {
    throw new TapwardenError('TW_ERR_USAGE', {
      detail: `sweep: ${combos.length} combinations x ${opts.recordings.length} recordings = ${total} cells; allowed: at most ${MAX_CELLS_WITHOUT_YES} without --yes`,
    });
  }
  const cellsDir = join(opts.outDir, 'cells');
  makeDirectory(cellsDir);
  const results = new Map<string, CellResult>();
  const pending: Batch[] = [];
  const plan: { recording: string; specs: CellSpec[] }[] = [];
  for (const recording of opts.recordings) {
    const bytes = fileHash(recording);
    const specs: CellSpec[] = combos.map((c) => ({ key: cellKey(recording, bytes ?? 'unreadable', c.config, judge), parameters: c.parameters, config: c.config }));
    if (opts.gate) specs.push({ key: cellKey(recording, bytes ?? 'unreadable', opts.gate.config, judge), parameters: {}, config: opts.gate.config, baseline: true });
    plan.push({ recording, specs });
    const todo: CellSpec[] = [];
    for (const s of specs) {
      const cached = join(cellsDir, s.key, 'cell.json');
      if (bytes !== null && existsSync(cached)) {
        try {
          results.set(s.key, JSON.parse(readFileSync(cached, 'utf8')) as CellResult);
          continue;
        } catch {
          // A damaged cache entry runs again.
        }
      }
      todo.push(s);
    }
    if (todo.length > 0) pending.push({ recording, judge, cells: todo });
  }
  const cached = results.size;
  let done = cached;
  opts.onProgress?.(done, total);
  const record = (r: BatchResult) => {
    for (const c of r.results) {
      results.set(c.key, c);
      if (c.error !== null) continue;
      const dir = join(cellsDir, c.key);
      makeDirectory(dir);
      const { outputs: _outputs, ...summary } = r.summaries[c.key]!;
      writeJsonAtomic(join(dir, 'summary.json'), summary);
      writeJsonAtomic(join(dir, 'cell.json'), c);
    }
    done += r.results.length;
    opts.onProgress?.(done, total);
  };
  if (opts.queue !== null) {
    const { runOnQueue } = await import('./queue.js');
    const batches = pending.flatMap((b) => split(b, Math.ceil(b.cells.length / 4)));
    await runOnQueue(opts.queue, batches, record, opts.onQueued ?? (() => {}));
  } else if (pending.length > 0) {
    const { Piscina } = await import('piscina');
    const parts = Math.max(1, Math.ceil(opts.jobs / pending.length));
    const batches = pending.flatMap((b) => split(b, Math.min(parts, b.cells.length)));
    const pool = new Piscina({ filename: new URL('./poolWorker.js', import.meta.url).href, maxThreads: opts.jobs, minThreads: Math.min(opts.jobs, batches.length) });
    try {
      await Promise.all(
        batches.map(async (b) => {
          let r: BatchResult;
          try {
            r = (await pool.run(b)) as BatchResult;
          } catch (err) {
            r = failedBatch(b, { code: 'TW_ERR_INTERNAL', message: `a sweep thread failed: ${oneLine(err)}` });
          }
          record(r);
        }),
      );
    } finally {
      await pool.destroy();
    }
  }
  // Cells in a fixed order: combination by combination, recording by recording, then baselines.
  const perCombination = combos.map((_, i) => plan.map((p) => results.get(p.specs[i]!.key)!));
  const cells: CellResult[] = perCombination.flat();
  const baselines = new Map<string, CellResult>();
  if (opts.gate) {
    for (const p of plan) {
      const b = results.get(p.specs.at(-1)!.key)!;
      baselines.set(p.recording, b);
      cells.push(b);
    }
  }
  const windowSeconds = opts.base.supervisor.windowSeconds;
  const aggregates = combos.map((c, i) => aggregate({ ...c.parameters }, perCombination[i]!, baselines, windowSeconds, opts.gate !== null));
  return { cells, combinations: aggregates, best: bestOf(aggregates), cached, ran: total - cached };
}

export function writeSweepJson(file: string, opts: SweepOptions, r: SweepResult): void {
  writeJsonAtomic(file, {
    tool: `tapwarden ${VERSION}`,
    base: opts.baseFile,
    recordings: opts.recordings,
    vary: opts.axes.map((a) => ({ key: a.key, values: a.values })),
    judgement: { minCancellationDb: opts.base.supervisor.minCancellationDb, source: opts.baseFile },
    gate: opts.gate?.file ?? null,
    cells: r.cells.map((c) => ({
      recording: c.recording,
      parameters: c.parameters,
      baseline: c.baseline,
      ...(c.figures ?? {}),
      verdict: c.figures?.verdict ?? 'failed',
      ...(c.channels ? { channel: c.channel } : {}),
      error: c.error,
      figures: c.error === null ? `cells/${c.key}/summary.json` : null,
    })),
    combinations: r.combinations,
    best: r.best,
  });
}

export function writeText(file: string, text: string): void {
  try {
    writeFileSync(file, text);
  } catch (err) {
    throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
  }
}
