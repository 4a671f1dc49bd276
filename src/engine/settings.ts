import { referenceChannels, type Config } from '../config/schema.js';
import type { EngineSettings } from './dualPath.js';

/** The engine's view of a validated configuration at a given sample rate. */
export function engineSettingsOf(config: Config, sampleRate: number): EngineSettings {
  return {
    sampleRate,
    filter: { ...config.filter, references: referenceChannels(config).length },
    supervisor: { ...config.supervisor },
    outputSignal: config.output.signal,
  };
}
