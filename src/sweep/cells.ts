import type { Config } from '../config/schema.js';
import { TapwardenError, oneLine } from '../errors.js';
import { figuresOf, worstIndex, type PolicyFigures } from '../replay/compare.js';
import { replay } from '../replay/replay.js';
import type { Summary } from '../replay/summary.js';
import type { Judgement } from '../run/summary.js';
import type { Scalar } from './grid.js';

/**
 * One sweep cell is one combination of parameters on one recording. Cells of the same recording
 * travel together as a batch, so a worker decodes the recording once for all of them (replay's
 * one-decode, many-policies loop). The same function runs in the local pool's threads and in
 * `tapwarden worker` processes on a queue.
 */

export interface CellSpec {
  /** The cache key: a hash of the recording's bytes, the effective config, the judgement and the version. */
  readonly key: string;
  readonly parameters: Readonly<Record<string, Scalar>>;
  readonly config: Config;
  /** The gate baseline's cell (parameters are the base config's own). */
  readonly baseline?: boolean;
}

export interface Batch {
  readonly recording: string;
  readonly judge: Judgement;
  readonly cells: readonly CellSpec[];
}

type Figures = Omit<PolicyFigures, 'name' | 'judgedAt'>;

/**
 * A cell's figures (the clean path's, as replay's comparison reports them), or its error. With
 * several measurement channels the figures are the worst channel's, and `channels` has each one's.
 */
export interface CellResult {
  readonly key: string;
  readonly recording: string;
  readonly parameters: Readonly<Record<string, Scalar>>;
  readonly baseline: boolean;
  readonly figures: Figures | null;
  /** The measurement channel the figures are from. */
  readonly channel: number | null;
  readonly channels: { channel: number; figures: Figures }[] | null;
  readonly error: { code: string; message: string } | null;
}

export interface BatchResult {
  readonly results: CellResult[];
  /** Per cell key, the full summary of its worst channel (written by the sweep to its cell's folder). */
  readonly summaries: Record<string, Summary>;
}

const errorOf = (err: unknown) =>
  err instanceof TapwardenError ? { code: err.code, message: err.message } : { code: 'TW_ERR_INTERNAL', message: oneLine(err) };

const cellOf = (batch: Batch, c: CellSpec) => ({ key: c.key, recording: batch.recording, parameters: c.parameters, baseline: c.baseline ?? false });

/** Every cell of a batch failed with this error (an unreadable recording, a dead worker or thread). */
export function failedBatch(batch: Batch, error: { code: string; message: string }): BatchResult {
  return { results: batch.cells.map((c) => ({ ...cellOf(batch, c), figures: null, channel: null, channels: null, error })), summaries: {} };
}

export function runBatch(batch: Batch): BatchResult {
  const base = (c: CellSpec) => cellOf(batch, c);
  try {
    const r = replay({
      recording: batch.recording,
      policies: batch.cells.map((c) => ({ name: c.key, config: c.config, configFile: `cell ${JSON.stringify(c.parameters)}` })),
      outDir: '',
      judge: batch.judge,
      files: false,
      skipRefused: true,
    });
    const refused = new Map(r.refused.map((x) => [x.policy, x.error]));
    const summaries: Record<string, Summary> = {};
    const results = batch.cells.map((c): CellResult => {
      const own = r.summaries.filter((s) => s.policy === c.key);
      if (own.length === 0) return { ...base(c), figures: null, channel: null, channels: null, error: errorOf(refused.get(c.key)) };
      const channels = own.map((s) => {
        const { name: _name, judgedAt: _judgedAt, ...figures } = figuresOf(s);
        return { channel: s.channel, figures };
      });
      const w = worstIndex(channels.map((x) => x.figures));
      summaries[c.key] = own[w]!;
      return { ...base(c), figures: channels[w]!.figures, channel: channels[w]!.channel, channels: channels.length > 1 ? channels : null, error: null };
    });
    return { results, summaries };
  } catch (err) {
    // The recording cannot be read (or the replay failed): every cell of it fails with the code.
    return failedBatch(batch, errorOf(err));
  }
}
