import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { startService } from '../../service/service.js';
import type { Command } from '../command.js';

export const serve: Command = {
  summary: 'run the engine on a live or file-fed stream with metrics, a status feed and control',
  usage: `Usage: tapwarden serve [--config FILE]

Runs the dual-path engine continuously on stream.source: a WAV file paced at its sample rate
(the default streams the demo bench recording, looped), or a PortAudio capture device. Serves
on http.host:http.port (default 127.0.0.1:9718):
  GET  /metrics                 Prometheus exposition
  GET  /healthz, /readyz        alive; stream running
  GET  /api/status              configuration, current figures, recent decisions
  GET  /api/weights?path=P      clean or adaptive weights
  WS   /api/feed                status messages and supervisor decisions
  POST /api/control/...         handoff, adaptation, handoffs, rollback, reset (bearer token)
Logs are JSON lines on stdout. SIGTERM or SIGINT saves the weights and stops.

Options:
  --config FILE  YAML overriding config/default.yaml
  -h, --help     this help`,
  options: { config: { type: 'string' } },
  positionals: [0, 0],
  async run(values) {
    const configFile = values['config'] as string | undefined;
    const config = loadConfig(configFile);
    const service = await startService(config, configFile ?? DEFAULT_CONFIG_PATH);
    await new Promise<void>((resolve) => {
      const stop = (signal: string) => void service.stop(`received ${signal}`).then(resolve);
      process.once('SIGTERM', () => stop('SIGTERM'));
      process.once('SIGINT', () => stop('SIGINT'));
    });
    // A capture stream blocked in the audio driver keeps the event loop alive; everything that
    // matters (weights, logs) is flushed by now.
    process.exit(0);
  },
};
