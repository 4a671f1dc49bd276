#!/usr/bin/env node
import { parseArgs } from 'node:util';
import { TapwardenError, oneLine, quote } from '../errors.js';
import { VERSION } from '../version.js';
import type { Command } from './command.js';

/** Each command is imported only when it runs, so --version and a bad argument answer at once. */
const COMMANDS: Record<string, { summary: string; load: () => Promise<Command> }> = {
  demo: { summary: 'write the demo bench recording and matching configs', load: async () => (await import('./commands/demo.js')).demo },
  replay: {
    summary: 'run a recording through the engine (one or several policies) and report',
    load: async () => (await import('./commands/replay.js')).replayCommand,
  },
  serve: {
    summary: 'run the engine on a live or file-fed stream with metrics, a status feed and control',
    load: async () => (await import('./commands/serve.js')).serve,
  },
  devices: { summary: 'list the sound devices PortAudio sees', load: async () => (await import('./commands/devices.js')).devices },
  analyze: {
    summary: "analyze a recording's reference: spectrum, eigenvalues, unexcited bands, step bounds, leak",
    load: async () => (await import('./commands/analyze.js')).analyze,
  },
  sweep: {
    summary: 'run every combination of varied settings on every recording and pick the best',
    load: async () => (await import('./commands/sweep.js')).sweepCommand,
  },
  worker: { summary: "take sweep cells from a Redis queue ('tapwarden sweep --queue')", load: async () => (await import('./commands/worker.js')).workerCommand },
  freeze: {
    summary: 'freeze a policy for the firmware: integer settings, a C99 port, test vectors',
    load: async () => (await import('./commands/freeze.js')).freezeCommand,
  },
  bench: { summary: "measure the engine's throughput on this machine, beside C references", load: async () => (await import('./commands/bench.js')).bench },
};

function usage(): string {
  const width = Math.max(...Object.keys(COMMANDS).map((k) => k.length));
  const lines = Object.entries(COMMANDS).map(([name, c]) => `  ${name.padEnd(width)}  ${c.summary}`);
  return `tapwarden ${VERSION}: supervised dual-path adaptive filtering for bench rigs

Usage: tapwarden <command> [options]

Commands:
${lines.join('\n')}

Run 'tapwarden <command> --help' for a command's options.`;
}

/**
 * `--name -40` as `--name=-40` for options that take a value: node's parser would read a value
 * that starts with '-' as an option of its own.
 */
function joinNegativeValues(args: readonly string[], options: Command['options']): string[] {
  const out: string[] = [];
  for (let i = 0; i < args.length; i++) {
    const a = args[i]!;
    const name = a.startsWith('--') ? a.slice(2) : null;
    const next = args[i + 1];
    if (name !== null && options[name]?.type === 'string' && next !== undefined && /^-(\d|\.\d|Infinity)/.test(next)) {
      out.push(`${a}=${next}`);
      i++;
    } else out.push(a);
  }
  return out;
}

/** Runs the CLI; returns the exit status. Never lets a stack trace reach the user. */
export async function main(argv: string[]): Promise<number> {
  const [name, ...rest] = argv;
  if (name === undefined || name === '--help' || name === '-h' || name === 'help') {
    process.stdout.write(usage() + '\n');
    return name === undefined ? 2 : 0;
  }
  if (name === '--version') {
    process.stdout.write(`${VERSION}\n`);
    return 0;
  }
  try {
    const entry = COMMANDS[name];
    if (entry === undefined) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `unknown command ${quote(name)}; commands: ${Object.keys(COMMANDS).join(', ')}` });
    }
    const cmd = await entry.load();
    const see = `see 'tapwarden ${name} --help'`;
    let parsed;
    try {
      parsed = parseArgs({
        args: joinNegativeValues(rest, cmd.options),
        options: { ...cmd.options, help: { type: 'boolean', short: 'h' } },
        allowPositionals: true,
        strict: true,
      });
    } catch (err) {
      const message = oneLine(err).replace(/\. To specify.*$/, '');
      throw new TapwardenError('TW_ERR_USAGE', { detail: `${name}: ${message.length > 160 ? `${message.slice(0, 159)}…` : message}; ${see}` });
    }
    if (parsed.values['help']) {
      process.stdout.write(cmd.usage + '\n');
      return 0;
    }
    const [min, max] = cmd.positionals;
    if (parsed.positionals.length < min || parsed.positionals.length > max) {
      const expected = min === max ? `${min}` : max === Infinity ? `at least ${min}` : `${min} to ${max}`;
      throw new TapwardenError('TW_ERR_USAGE', { detail: `${name}: expected ${expected} argument(s), got ${parsed.positionals.length}; ${see}` });
    }
    return await cmd.run(parsed.values, parsed.positionals);
  } catch (err) {
    if (err instanceof TapwardenError) {
      process.stderr.write(`tapwarden: ${err.message} [${err.code}]\n`);
      return err.exitCode;
    }
    const internal = new TapwardenError('TW_ERR_INTERNAL', { detail: oneLine(err) });
    process.stderr.write(`tapwarden: ${internal.message} [${internal.code}]\n`);
    if (process.env['TAPWARDEN_DEBUG']) process.stderr.write(`${(err as Error)?.stack ?? ''}\n`);
    return internal.exitCode;
  }
}

// A reader that stops early (`tapwarden bench | head -1`) is not an error.
for (const stream of [process.stdout, process.stderr]) {
  stream.on('error', (err: NodeJS.ErrnoException) => {
    if (err.code === 'EPIPE') process.exit(process.exitCode ?? 0);
    throw err;
  });
}

main(process.argv.slice(2)).then(
  (code) => {
    process.exitCode = code;
  },
  (err: unknown) => {
    process.stderr.write(`tapwarden: internal error: ${oneLine(err)}\n`);
    process.exitCode = 70;
  },
);
