import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { ERRORS } from '../../errors.js';
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
  WS   /api/feed                decision records, events and status messages
  POST /api/control/...         handoff, adaptation, handoffs, rollback, reset (bearer token)
Logs are JSON lines on stdout. SIGTERM or SIGINT saves the weights and exits 0; if the engine
fails, the weights last announced are saved and it exits ${ERRORS.TW_ERR_ENGINE_FAILED.exitCode}.

Options:
  --config FILE  YAML overriding config/default.yaml
  -h, --help     this help`,
  options: { config: { type: 'string' } },
  positionals: [0, 0],
  async run(values) {
    const configFile = values['config'] as string | undefined;
    const config = loadConfig(configFile);
    const { startService } = await import('../../service/service.js');
    const service = await startService(config, configFile ?? DEFAULT_CONFIG_PATH);
    const code = await new Promise<number>((resolve) => {
      const stop = (reason: string, exitCode: number) => void service.stop(reason).then(() => resolve(exitCode));
      process.once('SIGTERM', () => stop('received SIGTERM', 0));
      process.once('SIGINT', () => stop('received SIGINT', 0));
      void service.failed.then((why) => stop(`the engine failed: ${why}`, ERRORS.TW_ERR_ENGINE_FAILED.exitCode));
    });
    if (code !== 0) process.stderr.write(`tapwarden: the engine failed; the last clean weights were saved [TW_ERR_ENGINE_FAILED]\n`);
    return code;
  },
};
