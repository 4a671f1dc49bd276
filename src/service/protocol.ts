import type { EngineSettings, HandoffReason, WindowReport } from '../engine/dualPath.js';

/** What the main thread tells the engine worker. */
export type ToWorker =
  | { t: 'block'; ref: Float64Array; des: Float64Array; n: number }
  | { t: 'control'; op: ControlOp; id: number }
  | { t: 'weights'; id: number }
  | { t: 'restore'; weights: number[]; id: number };

export type ControlOp =
  | { kind: 'handoff' }
  | { kind: 'adaptation'; frozen: boolean }
  | { kind: 'handoffs'; frozen: boolean }
  | { kind: 'rollback' }
  | { kind: 'reset' };

export interface WeightsReply {
  clean: number[];
  adaptive: number[];
  cleanVersion: number;
  adapting: boolean;
  handoffsHeld: boolean;
}

/** What the engine worker tells the main thread. */
export type FromWorker =
  | { t: 'done'; n: number; seconds: number; saturations: { adaptive: number; clean: number }; nonFinite: number; output: Float64Array | null }
  | { t: 'window'; report: WindowReport }
  | { t: 'handoff'; version: number; weights: number[]; sample: number; reason: HandoffReason }
  | { t: 'rollback'; sample: number; reason: 'supervisor' | 'forced' }
  | { t: 'reply'; id: number; weights: WeightsReply };

export interface WorkerInit {
  settings: EngineSettings;
  /** Post the clean output of every block back (for playback). */
  wantOutput: boolean;
}
