/**
 * A stream of (reference, desired per measurement channel) blocks inside the engine worker: a paced WAV file or a capture
 * device. Blocks are handed over synchronously and the arrays reused; state changes and the end
 * of a file are reported through the callbacks.
 */
export interface SourceCallbacks {
  /** n frames of each reference and each measurement channel, in configured order (arrays reused after the call). */
  block(refs: readonly Float64Array[], des: readonly Float64Array[], n: number): void;
  state(up: boolean, reason: string): void;
  /** The source ended for good (a file without loop). */
  ended(): void;
}

export interface StreamSource {
  readonly description: string;
  start(): void;
  /** Stops delivering blocks; safe to call more than once. */
  stop(): void;
}
