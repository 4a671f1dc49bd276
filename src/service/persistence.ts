import { createHash } from 'node:crypto';
import { closeSync, fsyncSync, openSync, readFileSync, renameSync, writeSync } from 'node:fs';
import { dirname, extname } from 'node:path';
import type { EngineSettings } from '../engine/dualPath.js';
import { oneLine } from '../errors.js';
import type { RunEvent } from '../run/record.js';
import type { RunSink } from '../run/run.js';
import { LIVE_FILTER_KEYS, withChanges } from './settings.js';

/**
 * The clean path's weights on disk. A write goes to a temporary file that is fsynced and then
 * renamed over the snapshot (and the directory fsynced), so at any instant the snapshot file is
 * either the previous complete snapshot or the new complete one: a kill -9 mid-write cannot
 * leave half a file. A checksum catches any other damage.
 */

export const SNAPSHOT_FORMAT = 'tapwarden-weights/1';

export interface Snapshot {
  format: typeof SNAPSHOT_FORMAT;
  savedAt: string;
  taps: number;
  algorithm: string;
  arithmetic: string;
  sampleRate: number;
  cleanVersion: number;
  weights: number[];
  sha256: string;
  /** The live settings in effect when saved (README "Settings without a restart"); restored on start. */
  settings?: { filter: Record<string, unknown>; supervisor: Record<string, unknown> };
}

function digest(weights: number[]): string {
  return createHash('sha256').update(JSON.stringify(weights)).digest('hex');
}

export function makeSnapshot(settings: EngineSettings, weights: number[], cleanVersion: number): Snapshot {
  const f = settings.filter;
  const live = f as unknown as Record<string, unknown>;
  return {
    format: SNAPSHOT_FORMAT,
    savedAt: new Date().toISOString(),
    taps: f.taps,
    algorithm: f.algorithm,
    arithmetic: f.arithmetic,
    sampleRate: settings.sampleRate,
    cleanVersion,
    weights,
    sha256: digest(weights),
    settings: {
      filter: Object.fromEntries(LIVE_FILTER_KEYS.map((k) => [k, live[k]])),
      supervisor: { ...settings.supervisor },
    },
  };
}

export function writeSnapshot(file: string, snapshot: Snapshot): void {
  const tmp = `${file}.tmp`;
  const fd = openSync(tmp, 'w');
  try {
    writeSync(fd, JSON.stringify(snapshot) + '\n');
    fsyncSync(fd);
  } finally {
    closeSync(fd);
  }
  renameSync(tmp, file);
  try {
    const dir = openSync(dirname(file), 'r');
    fsyncSync(dir);
    closeSync(dir);
  } catch {
    // Some filesystems refuse fsync on a directory; the rename is still atomic.
  }
}

/** Reads and checks a snapshot; `problem` says why it cannot be used. */
export function readSnapshot(file: string): { snapshot: Snapshot } | { problem: string } {
  let data: unknown;
  try {
    data = JSON.parse(readFileSync(file, 'utf8'));
  } catch (err) {
    return { problem: `cannot read ${file}: ${oneLine(err)}` };
  }
  const s = data as Partial<Snapshot>;
  if (s.format !== SNAPSHOT_FORMAT) return { problem: `${file} is not a ${SNAPSHOT_FORMAT} snapshot` };
  if (!Array.isArray(s.weights) || !s.weights.every(Number.isFinite)) return { problem: `${file} holds no finite weights` };
  if (s.sha256 !== digest(s.weights)) return { problem: `${file} fails its checksum` };
  return { snapshot: s as Snapshot };
}

/** Why a snapshot does not fit this engine, or null when it does. */
export function incompatibility(s: Snapshot, settings: EngineSettings): string | null {
  const f = settings.filter;
  const diffs: string[] = [];
  const weights = f.taps * (f.references ?? 1);
  if (s.taps !== f.taps) diffs.push(`taps ${s.taps} vs ${f.taps}`);
  else if (s.weights.length !== weights) diffs.push(`${s.weights.length} weights vs ${weights} (${f.references ?? 1} reference(s) of ${f.taps} taps)`);
  if (s.arithmetic !== f.arithmetic) diffs.push(`arithmetic ${s.arithmetic} vs ${f.arithmetic}`);
  if (s.algorithm !== f.algorithm) diffs.push(`algorithm ${s.algorithm} vs ${f.algorithm}`);
  if (s.sampleRate !== settings.sampleRate) diffs.push(`sample rate ${s.sampleRate} vs ${settings.sampleRate} Hz`);
  return diffs.length ? `the snapshot was taken with ${diffs.join(', ')}` : null;
}

/** The snapshot file of one measurement channel: persistence.file itself with one, FILE.ch<N>.EXT with several. */
export function snapshotFileOf(file: string, channel: number, several: boolean): string {
  if (!several) return file;
  const ext = extname(file);
  return `${file.slice(0, file.length - ext.length)}.ch${channel}${ext}`;
}

/** Writes at most one snapshot per interval; a newer one waits for the interval to end. */
export class SnapshotWriter {
  private lastWrite = 0;
  private pending: Snapshot | null = null;
  private timer: NodeJS.Timeout | null = null;

  constructor(
    readonly file: string,
    private readonly minIntervalSeconds: number,
    private readonly onResult: (ok: boolean, detail: string) => void,
  ) {}

  offer(s: Snapshot): void {
    this.pending = s;
    const wait = this.lastWrite + this.minIntervalSeconds * 1000 - Date.now();
    if (wait <= 0) this.flush();
    else if (this.timer === null) this.timer = setTimeout(() => this.flush(), wait);
  }

  /** Writes the pending snapshot now, if any. */
  flush(): void {
    if (this.timer) clearTimeout(this.timer);
    this.timer = null;
    const s = this.pending;
    if (s === null) return;
    this.pending = null;
    this.lastWrite = Date.now();
    try {
      writeSnapshot(this.file, s);
      this.onResult(true, `clean weights version ${s.cleanVersion} saved to ${this.file}`);
    } catch (err) {
      this.onResult(false, `cannot save weights to ${this.file}: ${oneLine(err)}`);
    }
  }
}

/**
 * The run's persistence sink: every new clean-path version (a handoff, a forced handoff, an
 * operator reset) is offered to the writer; a restored snapshot is not written back. It keeps the
 * latest weights, so a shutdown can save them even when the engine cannot be asked.
 */
export class SnapshotSink implements RunSink {
  latest: { weights: number[]; version: number } | null = null;

  constructor(
    readonly writer: SnapshotWriter,
    private settings: EngineSettings,
    /** The measurement channel whose weights this sink keeps (events of others are not its own). */
    readonly channel: number,
  ) {}

  onEvent(e: RunEvent, weights: Float64Array | null): void {
    if (e.channel !== this.channel) return;
    if (e.type === 'settings') {
      const next = withChanges(this.settings, e.changes);
      this.settings = { ...this.settings, filter: next.filter as unknown as EngineSettings['filter'], supervisor: next.supervisor as unknown as EngineSettings['supervisor'] };
      // Saved with the weights in effect, so a restart resumes with both.
      if (this.latest !== null) this.writer.offer(makeSnapshot(this.settings, this.latest.weights, this.latest.version));
      return;
    }
    if (e.type !== 'handoff' || weights === null) return;
    this.latest = { weights: Array.from(weights), version: e.version };
    if (e.reason !== 'restored') this.writer.offer(makeSnapshot(this.settings, this.latest.weights, e.version));
  }

  /** Saves these weights (or the latest known) now. */
  save(final: { weights: number[]; version: number } | null): void {
    const w = final ?? this.latest;
    if (w !== null) this.writer.offer(makeSnapshot(this.settings, w.weights, w.version));
    this.writer.flush();
  }
}
