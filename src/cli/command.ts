import type { ParseArgsConfig } from 'node:util';

/** One subcommand: its help text, its options (node:util parseArgs form) and its action. */
export interface Command {
  readonly summary: string;
  readonly usage: string;
  readonly options: NonNullable<ParseArgsConfig['options']>;
  /** Positional arguments allowed: [min, max]. */
  readonly positionals: readonly [number, number];
  run(values: Record<string, string | boolean | string[] | undefined>, positionals: string[]): Promise<number> | number;
}
