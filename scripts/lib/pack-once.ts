/**
 * One pack, for scripts/bench-pack.ts, with the modules of the source tree TREE (this checkout, or
 * another revision's extracted tree), so that two revisions' writers run the same way:
 * - `job` (the default): a job's finished estimate, its result files as a model source
 *   (`openJobModelSource`), packed into FILE by `packModelSource`. The source reads each order in a
 *   thread of its own when the tree's `openJobModelSource` has the `threads` option (as `quern
 *   estimate` does) and THREADS is `on` (the default).
 * - `arpa`: an ARPA file, as `quern pack` reads it: `openArpaSource` (its orders sorted on disk
 *   beside FILE) and `packModelSource` where the tree has them, else `readArpa` (the whole model in
 *   memory) and `packModel`. SORT_BYTES: `openArpaSource`'s sortBytes (`quern pack --memory`).
 * Prints one JSON line: wall and CPU time of the pack (the reading of the source included), and
 * what was written.
 *
 *   node --import tsx scripts/lib/pack-once.ts TREE JOB|ARPA FILE [8|16|-] [on|off] [job|arpa] [SORT_BYTES|-]
 */
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';

const [tree, job, file, quantArg, threads, modeArg, sortBytesArg] = process.argv.slice(2);
const mode = modeArg ?? 'job';
const sortBytes = sortBytesArg === undefined || sortBytesArg === '-' ? undefined : Number(sortBytesArg);
const quant = quantArg === '-' ? undefined : quantArg;
if (tree === undefined || job === undefined || file === undefined) {
  process.stderr.write('usage: pack-once.ts TREE JOB|ARPA FILE [8|16|-] [on|off] [job|arpa] [SORT_BYTES|-]\n');
  process.exit(2);
}
const load = (relative: string) => import(pathToFileURL(join(tree, relative)).href);
const { packModel, packModelSource } = await load('src/pack/writer.ts');
const { nodeFs } = await load('src/job/fsio.ts');
const options = { fingerprint: 'bench-pack', ...(quant === undefined ? {} : { quantBits: Number(quant) }) };

const started = performance.now();
const cpu = process.cpuUsage();
let summary: { bytes: number; ngrams: number[] };
if (mode === 'arpa') {
  const arpa = await load('src/pack/arpa.ts');
  if (typeof arpa.openArpaSource === 'function') {
    const { Spool } = await load('src/pack/spool.ts');
    const source = await arpa.openArpaSource(job, (n: number, name: string) => Spool.create(nodeFs, `${file}.arpa-o${n}-${name}.tmp`), sortBytes === undefined ? {} : { sortBytes });
    try {
      summary = await packModelSource(source, options, nodeFs, file);
    } finally {
      await source.remove();
    }
  } else {
    summary = await packModel(await arpa.readArpa(job), options, nodeFs, file);
  }
} else {
  const { openJobModelSource } = await load('src/estimate/job-model-source.ts');
  const source = await openJobModelSource(job, { threads: threads !== 'off' });
  summary = await packModelSource(source, options, nodeFs, file);
}
const used = process.cpuUsage(cpu);
process.stdout.write(JSON.stringify({ elapsedMs: performance.now() - started, cpuMs: (used.user + used.system) / 1000, bytes: summary.bytes, ngrams: summary.ngrams }) + '\n');
