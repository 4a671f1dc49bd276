import type { EngineSettings } from '../engine/dualPath.js';
import type { Config } from '../config/schema.js';
import type { DecisionRecord, RunEvent } from '../run/record.js';
import type { Episode } from './captureRecorder.js';

/** What the main thread asks of the engine worker; each request is answered by id. */
export type ToWorker =
  | { t: 'start' }
  /** channel: one measurement channel, or null for every one. */
  | { t: 'control'; op: ControlOp; channel: number | null; id: number }
  | { t: 'weights'; id: number }
  | { t: 'restore'; weights: number[]; channel: number; id: number }
  | { t: 'stop'; id: number };

export type ControlOp =
  | { kind: 'handoff' }
  | { kind: 'adaptation'; frozen: boolean }
  | { kind: 'handoffs'; frozen: boolean }
  | { kind: 'rollback' }
  | { kind: 'reset' }
  /** New settings from the next window boundary on (validated by the main thread). */
  | { kind: 'settings'; settings: EngineSettings }
  /** An operator mark: a captured episode around now (captures are on: the main thread checked). */
  | { kind: 'mark'; note: string | null };

/** One measurement channel's weights and flags. */
export interface ChannelState {
  channel: number;
  clean: number[];
  adaptive: number[];
  cleanVersion: number;
  adapting: boolean;
  handoffsHeld: boolean;
}

/** Every measurement channel's state, in configured order. */
export interface WeightsReply {
  channels: ChannelState[];
}

/** What the engine worker tells the main thread. */
export type FromWorker =
  /** One per window. */
  | { t: 'record'; record: DecisionRecord }
  /** A handoff (with the clean weights now held) or a rollback. */
  | { t: 'event'; event: RunEvent; weights: Float64Array | null }
  /** One per feed.intervalSeconds of stream time: the feed's status message is due. */
  | { t: 'tick'; streamSeconds: number }
  /** The source came up or went down. */
  | { t: 'state'; up: boolean; reason: string }
  /** A warning about the source (a damaged header, a step near its bound). */
  | { t: 'warning'; message: string }
  /** The source ended for good (a file without loop). */
  | { t: 'ended' }
  /** A captured episode is complete: the main thread writes it. */
  | { t: 'episode'; episode: Episode }
  | { t: 'reply'; id: number; weights: WeightsReply }
  | { t: 'failed'; id: number | null; message: string };

/** A block queue toward another group's thread (blockRing.ts): its buffer and shape, and that group. */
export interface RingInit {
  buffer: SharedArrayBuffer;
  slots: number;
  columns: number;
  frames: number;
  /** The group's measurement channels, as indices into measurementChannels. */
  group: number[];
}

export interface WorkerInit {
  /** This thread's measurement channels, as indices into measurementChannels. */
  group: number[];
  /** The input thread (the first group's): it owns the source and feeds the others' queues. */
  input: boolean;
  /** The input thread: a queue toward each other group; another group's thread: its own queue. */
  rings: RingInit[];
  config: Config;
  /** The WAV file a file source streams (resolved: the demo when stream.file is null). */
  file: string | null;
  sampleRate: number;
  telemetry: SharedArrayBuffer;
}
