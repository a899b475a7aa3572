/**
 * One pack of a job's finished estimate, for scripts/bench-pack.ts: the job's result files as a
 * model source (`openJobModelSource`), packed into FILE by `packModelSource` — both imported from
 * the source tree TREE (this checkout, or another revision's extracted tree), so that two revisions'
 * writers run the same way. Prints one JSON line: wall and CPU time of the pack (the source's
 * opening included), and what was written.
 *
 * The source reads each order in a thread of its own when the tree's `openJobModelSource` has the
 * `threads` option (as `quern estimate` does) and THREADS is `on` (the default).
 *
 *   node --import tsx scripts/lib/pack-once.ts TREE JOB FILE [8|16|-] [on|off]
 */
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';

const [tree, job, file, quantArg, threads] = process.argv.slice(2);
const quant = quantArg === '-' ? undefined : quantArg;
if (tree === undefined || job === undefined || file === undefined) {
  process.stderr.write('usage: pack-once.ts TREE JOB FILE [8|16|-] [on|off]\n');
  process.exit(2);
}
const load = (relative: string) => import(pathToFileURL(join(tree, relative)).href);
const { openJobModelSource } = await load('src/estimate/job-model-source.ts');
const { packModelSource } = await load('src/pack/writer.ts');
const { nodeFs } = await load('src/job/fsio.ts');

const started = performance.now();
const cpu = process.cpuUsage();
const source = await openJobModelSource(job, { threads: threads !== 'off' });
const summary = await packModelSource(source, { fingerprint: 'bench-pack', ...(quant === undefined ? {} : { quantBits: Number(quant) }) }, nodeFs, file);
const used = process.cpuUsage(cpu);
process.stdout.write(JSON.stringify({ elapsedMs: performance.now() - started, cpuMs: (used.user + used.system) / 1000, bytes: summary.bytes, ngrams: summary.ngrams }) + '\n');
