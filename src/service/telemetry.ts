import { MAX_MEASUREMENT_CHANNELS } from '../config/schema.js';

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
  'playbackUnderruns',
  'playbackDroppedBlocks',
  'blockSecondsSum',
  'streamSeconds',
] as const;

/** Counters each measurement channel's run keeps for itself. */
const CHANNEL_SLOTS = ['samples', 'adaptiveWeightSaturations', 'adaptiveSignalSaturations', 'cleanSignalSaturations', 'nonFiniteSamples', 'outOfRangeSamples'] as const;

export type Slot = (typeof SLOTS)[number];
export type ChannelSlot = (typeof CHANNEL_SLOTS)[number];
const INDEX = Object.fromEntries(SLOTS.map((s, i) => [s, i])) as Record<Slot, number>;
const CHANNEL_INDEX = Object.fromEntries(CHANNEL_SLOTS.map((s, i) => [s, i])) as Record<ChannelSlot, number>;
const HIST_AT = SLOTS.length;
const CHANNELS_AT = HIST_AT + BLOCK_SECONDS_BUCKETS.length + 1;
const SIZE = CHANNELS_AT + CHANNEL_SLOTS.length * MAX_MEASUREMENT_CHANNELS;

export class Telemetry {
  readonly values: Float64Array;

  constructor(readonly buffer: SharedArrayBuffer = new SharedArrayBuffer(8 * SIZE)) {
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

  /** A counter of the measurement channel at `index` in input.desiredChannels order. */
  getChannel(index: number, slot: ChannelSlot): number {
    return this.values[CHANNELS_AT + index * CHANNEL_SLOTS.length + CHANNEL_INDEX[slot]]!;
  }

  setChannel(index: number, slot: ChannelSlot, v: number): void {
    this.values[CHANNELS_AT + index * CHANNEL_SLOTS.length + CHANNEL_INDEX[slot]] = v;
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
