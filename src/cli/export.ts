/** `quern export`: a Quern model file → the ARPA back-off text format. */
import type { CommandModule } from 'yargs';
import { QuernError } from '../errors.ts';
import { stageFs } from '../job/fsio.ts';
import { writeArpaFile, writeArpaSource } from '../pack/arpa.ts';
import { openModel } from '../pack/reader.ts';

export const exportCommand: CommandModule = {
  command: 'export <model>',
  describe: 'Write a model file in the ARPA back-off format (log10 values to 7 significant digits)',
  builder: (yargs) => yargs
    .positional('model', { type: 'string', describe: 'Model file written by quern pack' })
    .option('format', { type: 'string', choices: ['arpa'], default: 'arpa', describe: 'Output format: the ARPA back-off text format (the only one for now)' })
    .option('out', { type: 'string', describe: 'Write to this file (atomically) instead of standard output; gzip-compressed when the name ends in .gz' })
    .example('$0 export model.qm --format arpa --out model.arpa', 'The model as an ARPA file'),
  handler: async (argv) => {
    // Streamed order by order from the file (no order held in memory), after the structure check.
    const model = (await openModel(argv.model as string)).toModelSource();
    if (typeof argv.out === 'string') {
      if (argv.out === '') throw new QuernError('config', '--out expects a file name');
      await writeArpaFile(model, stageFs(), argv.out);
    } else {
      await writeArpaSource(model, process.stdout);
    }
  },
};
