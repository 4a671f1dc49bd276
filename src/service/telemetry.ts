/**
 * The engine worker's running counters, in a SharedArrayBuffer: the worker writes them as it
 * goes and the main thread reads them when Prometheus scrapes, so no message carries them and
 * a busy main thread cannot slow the worker. Each slot is written by the worker only; a read
 * may be one block stale, never torn in a way that matters for a monotonic counter.
 */

export const BLOCK_SECONDS_BUCKETS = [1e-5, 2e-5, 5e-5, 1e-4, 2e-4, 5e-4, 1e-3, 2e-3, 5e-3, 1e-2, 2e-2, 5e-2, 0.1] as const;

const SLOTS = [
  'samples',
  'blocks',
  'overruns',
  'queueDepth',
  'queueCapacity',
  'adaptiveWeightSaturations',
  'adaptiveSignalSaturations',
  'cleanSignalSaturations',
  'nonFiniteSamples',
  'outOfRangeSamples',
  'playbackUnderruns',
  'playbackDroppedBlocks',
  'blockSecondsSum',
  'streamSeconds',
] as const;

export type Slot = (typeof SLOTS)[number];
const INDEX = Object.fromEntries(SLOTS.map((s, i) => [s, i])) as Record<Slot, number>;
const HIST_AT = SLOTS.length;

export class Telemetry {
  readonly values: Float64Array;

  constructor(readonly buffer: SharedArrayBuffer = new SharedArrayBuffer(8 * (SLOTS.length + BLOCK_SECONDS_BUCKETS.length + 1))) {
    this.values = new Float64Array(buffer);
  }

  get(slot: Slot): number {
    return this.values[INDEX[slot]]!;
  }

  set(slot: Slot, v: number): void {
    this.values[INDEX[slot]] = v;
  }

  add(slot: Slot, v: number): void {
    this.values[INDEX[slot]]! += v;
  }

  /** Counts one block's processing time in the histogram (cumulative buckets are formed on read). */
  observeBlock(seconds: number): void {
    let b = 0;
    while (b < BLOCK_SECONDS_BUCKETS.length && seconds > BLOCK_SECONDS_BUCKETS[b]!) b++;
    this.values[HIST_AT + b]!++;
    this.values[INDEX.blockSecondsSum]! += seconds;
  }

  /** Blocks per bucket (the last one beyond the largest bound). */
  bucketCounts(): number[] {
    return Array.from(this.values.subarray(HIST_AT, HIST_AT + BLOCK_SECONDS_BUCKETS.length + 1));
  }
}
