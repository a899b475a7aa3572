/** `quern report`: count-of-counts, discounts and diagnostics of a counted job. */
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { writeFileAtomic, stageFs } from '../job/fsio.ts';
import { loadStatsInput } from '../stats/job-stats.ts';
import { buildReport } from '../stats/report.ts';
import { renderHtml } from '../stats/render-html.ts';
import { renderText } from '../stats/render-text.ts';

export const reportCommand: CommandModule = {
  command: 'report <job>',
  describe: 'Count-of-counts per order, Good-Turing and discount estimates, and diagnostics of a counted job',
  builder: (yargs) => yargs
    .positional('job', { type: 'string', describe: 'Job directory of a finished count' })
    .option('json', { type: 'boolean', default: false, describe: 'Print the report as JSON (schema: docs/report-schema.md)' })
    .option('html', { type: 'string', describe: 'Also write a self-contained page with charts to this file' })
    .option('width', { type: 'number', default: 100, describe: 'Text width of the terminal report' })
    .example('$0 report job --html report.html', 'Print the report and write the page with charts'),
  handler: async (argv) => {
    const report = buildReport(await loadStatsInput(argv.job as string));
    if (typeof argv.html === 'string') {
      if (argv.html === '') throw new QuernError('config', '--html expects a file name');
      await writeFileAtomic(stageFs(), argv.html, renderHtml(report));
    }
    if (argv.json) process.stdout.write(JSON.stringify(report, null, 2) + '\n');
    else process.stdout.write(renderText(report, Number(argv.width)));
  },
};
