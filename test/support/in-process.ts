/** Runs `quern` command modules in-process through yargs, as the CLI would, capturing standard output. */
import { vi } from 'vitest';
import yargs, { type CommandModule } from 'yargs';

/** Parses `args` with `commands` registered (strict, failures thrown) and returns what they printed. */
export async function runCommandsInProcess(commands: readonly CommandModule[], args: string[]): Promise<string> {
  let printed = '';
  vi.spyOn(process.stdout, 'write').mockImplementation((chunk: string | Uint8Array) => {
    printed += typeof chunk === 'string' ? chunk : Buffer.from(chunk).toString('utf8');
    return true;
  });
  try {
    let parser = yargs(args);
    for (const command of commands) parser = parser.command(command);
    await parser.strict().fail((message, error) => { throw error ?? new Error(message); }).parseAsync();
  } finally {
    vi.restoreAllMocks();
  }
  return printed;
}
