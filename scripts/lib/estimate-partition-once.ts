/**
 * One partition of a counted job estimated alone, on the main thread, for scripts/bench-estimate.ts
 * (--partition): a measurement of the estimate's own code without the worker pool, the other
 * partitions or the second core, so that two revisions compare well on a busy machine. Prints one
 * JSON line: elapsed and CPU time of the partition's task (the settings — stats, vocabulary, the
 * unigram level — are read first and not counted), and its result files.
 *
 *   node --import tsx scripts/lib/estimate-partition-once.ts JOB METHOD PARTITION
 *
 * The results are written into JOB/estimate/p<PARTITION>/ (JOB is a shadow job the benchmark made).
 */
import { rm } from 'node:fs/promises';
import * as path from 'node:path';
import type { EstimateRequest } from '../../src/estimate/estimate.ts';
import type { PlannedRequest } from '../../src/estimate/method-plan.ts';
import { estimatePartition, ESTIMATE_DIR } from '../../src/estimate/partition-estimate.ts';
import { stageInputs } from '../../src/estimate/stream-stage.ts';
import { stageFs } from '../../src/job/fsio.ts';
import { readManifest } from '../../src/job/manifest.ts';

const [jobDir, method, partitionText] = process.argv.slice(2);
const partition = Number(partitionText);
const job = await readManifest(jobDir);
if (job === null || job === undefined) throw new Error(`${jobDir}: no job.json`);
if (!(Number.isInteger(partition) && partition >= 0 && partition < job.config.partitions)) throw new Error(`partition ${partitionText}: 0..${job.config.partitions - 1}`);
const request = { method, fallback: true } as EstimateRequest as PlannedRequest;
const { settings } = await stageInputs(job, jobDir, request);
await rm(path.join(jobDir, ESTIMATE_DIR), { recursive: true, force: true });
const cpuBefore = process.cpuUsage();
const started = performance.now();
const result = await estimatePartition(stageFs(), jobDir, partition, settings);
const elapsedMs = performance.now() - started;
const cpu = process.cpuUsage(cpuBefore);
process.stdout.write(JSON.stringify({ elapsedMs: Math.round(elapsedMs), cpuMs: Math.round((cpu.user + cpu.system) / 1000), files: result.files }) + '\n');
