/** The `quern` command: yargs, one module per command, errors mapped to exit codes in one place. */
import yargs from 'yargs';
import { hideBin } from 'yargs/helpers';
import { COMMAND_LOADERS } from './commands.ts';
import { onStdoutError, reportError, EXIT_STATUS } from './exit.ts';

/**
 * The arguments with those after `--` made plain operands: by the usual convention `--` ends the
 * options, so that a file may be named `-x.txt`; but yargs counts nothing after `--` towards a
 * command's required positionals. So `--` is dropped and each argument after it passed on as a
 * positional, one that starts with `-` (other than `-` alone: standard input) as `./` + it.
 */
function operandsAfterDashes(args: readonly string[]): string[] {
  const at = args.indexOf('--');
  if (at < 0) return [...args];
  return [...args.slice(0, at), ...args.slice(at + 1).map((arg) => (arg.startsWith('-') && arg !== '-' ? `./${arg}` : arg))];
}

export async function main(argv: string[]): Promise<number> {
  try {
    const args = operandsAfterDashes(argv);
    const first = args[0];
    const loaders = first !== undefined && Object.hasOwn(COMMAND_LOADERS, first) ? [COMMAND_LOADERS[first]] : Object.values(COMMAND_LOADERS);
    const commands = await Promise.all(loaders.map((load) => load()));
    let parser = yargs(args)
      .scriptName('quern')
      .usage('$0 <command> [options]\n\nCount n-grams of huge corpora and build n-gram language models.');
    for (const command of commands) parser = parser.command(command);
    await parser
      .demandCommand(1, 'Say which command to run; see quern --help')
      .strict()
      .recommendCommands()
      .help()
      .alias('help', 'h')
      .version()
      .wrap(Math.min(100, process.stdout.columns ?? 100))
      .fail((message, error) => {
        if (error) throw error;
        const usage = new Error(message) as Error & { usage: true };
        usage.usage = true;
        throw usage;
      })
      .parseAsync();
    return 0;
  } catch (error) {
    if ((error as { usage?: boolean }).usage) {
      process.stderr.write(`quern: ${(error as Error).message}\nSee quern --help.\n`);
      return EXIT_STATUS.config;
    }
    return reportError(error);
  }
}

process.stdout.on('error', onStdoutError);
const status = await main(hideBin(process.argv));
process.exitCode = status;
