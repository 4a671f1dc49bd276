#!/usr/bin/env node
import { parseArgs } from 'node:util';
import { TapwardenError, oneLine } from '../errors.js';
import { VERSION } from '../version.js';
import type { Command } from './command.js';
import { analyze } from './commands/analyze.js';
import { bench } from './commands/bench.js';
import { demo } from './commands/demo.js';
import { devices } from './commands/devices.js';
import { replayCommand } from './commands/replay.js';
import { serve } from './commands/serve.js';

const COMMANDS: Record<string, Command> = {
  demo,
  replay: replayCommand,
  serve,
  devices,
  analyze,
  bench,
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
    const cmd = COMMANDS[name];
    if (cmd === undefined) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `unknown command ${JSON.stringify(name)}; commands: ${Object.keys(COMMANDS).join(', ')}` });
    }
    const see = `see 'tapwarden ${name} --help'`;
    let parsed;
    try {
      parsed = parseArgs({
        args: rest,
        options: { ...cmd.options, help: { type: 'boolean', short: 'h' } },
        allowPositionals: true,
        strict: true,
      });
    } catch (err) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `${name}: ${oneLine(err).replace(/\. To specify.*$/, '')}; ${see}` });
    }
    if (parsed.values['help']) {
      process.stdout.write(cmd.usage + '\n');
      return 0;
    }
    const [min, max] = cmd.positionals;
    if (parsed.positionals.length < min || parsed.positionals.length > max) {
      const expected = min === max ? `${min}` : `${min} to ${max}`;
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

main(process.argv.slice(2)).then(
  (code) => {
    process.exitCode = code;
  },
  (err: unknown) => {
    process.stderr.write(`tapwarden: internal error: ${oneLine(err)}\n`);
    process.exitCode = 70;
  },
);
