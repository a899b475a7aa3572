/** `quern verify`: check a job directory's files against its manifest and each other. */
import type { CommandModule } from 'yargs';
import { verifyFailure, verifyJob, type VerifyReport } from '../job/verify.ts';

const LABEL = { ok: 'ok', failed: 'FAILED', skipped: 'skipped' } as const;

/** Prints the report: one line per check with its numbers, the problems of failed checks below it. */
export function printVerifyReport(report: VerifyReport, out: NodeJS.WritableStream = process.stdout): void {
  const lines: string[] = [`job ${report.jobDir}`];
  if (report.stages !== null) {
    const { vocab, count, merge, continuation } = report.stages;
    lines.push(`stages: vocabulary ${vocab}, count ${count}, merge ${merge}, continuation counts ${continuation}`);
  }
  if (report.pending.length > 0) lines.push(`pending: ${report.pending.join(', ')} (verified what exists)`);
  const nameWidth = Math.max(...report.checks.map((c) => c.name.length));
  for (const check of report.checks) {
    lines.push(`${LABEL[check.status].padEnd(7)}  ${check.name.padEnd(nameWidth)}  ${check.summary}`);
    for (const problem of check.problems) lines.push(`           - ${problem}`);
    if (check.problemsOmitted > 0) lines.push(`           - and ${check.problemsOmitted} more`);
  }
  const failed = report.checks.filter((c) => c.status === 'failed').length;
  lines.push(failed === 0 ? 'verified: every check passed' : `verification FAILED: ${failed} of ${report.checks.length} checks`);
  out.write(lines.join('\n') + '\n');
}

/** The yargs module of `quern verify`; a failed check ends it with QuernError('corrupt'), exit status 5. */
export const verifyCommand: CommandModule = {
  command: 'verify <job>',
  describe: 'Check a job directory: job.json, the vocabulary, every run file, every block of the count store, stats.json, and (with --inputs) the inputs',
  builder: (yargs) => yargs
    .positional('job', { type: 'string', describe: 'Job directory of quern count (finished or not)' })
    .option('inputs', { type: 'boolean', default: false, describe: 'Also re-read each input\'s size, mtime and fingerprint and compare them with job.json' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the report as JSON' })
    .example('$0 verify job', 'Check every file of the job; exit status 5 if anything is damaged')
    .example('$0 verify job --inputs --json', 'Also check that the inputs are unchanged; print the report as JSON'),
  handler: async (argv) => {
    const report = await verifyJob(argv.job as string, { inputs: Boolean(argv.inputs) });
    if (argv.json) process.stdout.write(JSON.stringify(report, null, 2) + '\n');
    else printVerifyReport(report);
    const failure = verifyFailure(report);
    if (failure) throw failure;
  },
};
