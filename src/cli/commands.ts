import type { CommandModule } from 'yargs';

/**
 * The command modules by name, loaded on demand: a command loads its own code only (loading every
 * command's took about a second of each start, most of what a quick `quern report` costs). With
 * no known command name first — `quern --help`, a typo — all are loaded, for the listing and the
 * suggestions. test/cli/commands.test.ts checks that each name is its module's command.
 */
export type AnyCommand = CommandModule<any, any>;
export const COMMAND_LOADERS: Record<string, () => Promise<AnyCommand>> = {
  count: async () => (await import('./count.ts')).countCommand,
  ngrams: async () => (await import('./ngrams.ts')).ngramsCommand,
  report: async () => (await import('./report.ts')).reportCommand,
  estimate: async () => (await import('./estimate.ts')).estimateCommand,
  pack: async () => (await import('./pack.ts')).packCommand,
  info: async () => (await import('./info.ts')).infoCommand,
  export: async () => (await import('./export.ts')).exportCommand,
  score: async () => (await import('./score.ts')).scoreCommand,
  next: async () => (await import('./next.ts')).nextCommand,
  build: async () => (await import('./build.ts')).buildCommand,
  verify: async () => (await import('./verify.ts')).verifyCommand,
};

