import { listDevices } from '../../io/audio.js';
import type { Command } from '../command.js';

export const devices: Command = {
  summary: 'list the sound devices PortAudio sees',
  usage: `Usage: tapwarden devices [--json]

Lists capture and playback devices with their index, name, channel counts and default sample
rate. Use the index or the exact name in stream.device.input and stream.device.playback.

Options:
  --json      one JSON array on stdout
  -h, --help  this help`,
  options: { json: { type: 'boolean' } },
  positionals: [0, 0],
  run(values) {
    const list = listDevices();
    if (values['json']) {
      process.stdout.write(JSON.stringify(list, null, 1) + '\n');
      return 0;
    }
    if (list.length === 0) process.stdout.write('no devices\n');
    for (const d of list) {
      process.stdout.write(
        `${String(d.id).padStart(3)}  ${d.name.padEnd(32)}  in ${String(d.maxInputChannels).padStart(2)}  out ${String(d.maxOutputChannels).padStart(2)}  ${d.defaultSampleRate} Hz  ${d.hostAPIName}\n`,
      );
    }
    return 0;
  },
};
