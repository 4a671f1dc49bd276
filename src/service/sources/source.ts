import type { EventEmitter } from 'node:events';

/** Where a source hands its blocks: the engine's bounded queue. */
export interface Feeder {
  readonly hasRoom: boolean;
  /** Queues a block (the arrays are transferred); false when it was dropped (an overrun). */
  submit(ref: Float64Array, des: Float64Array, n: number): boolean;
  /** Calls back once after the engine has taken a block. */
  once(event: 'processed', listener: () => void): unknown;
}

export interface SourceEvents {
  state: [up: boolean, reason: string];
}

/** A stream of (reference, desired) blocks: a paced file or a capture device. */
export interface StreamSource extends EventEmitter<SourceEvents> {
  readonly sampleRate: number;
  readonly description: string;
  readonly up: boolean;
  start(feeder: Feeder): void;
  stop(): void;
}
