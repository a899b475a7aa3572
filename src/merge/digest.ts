/**
 * A digest of a job's counts: sha256 over every stored n-gram and count, order by order, in key
 * order. Equal digests mean equal counts, whatever the workers, budget, chunking or interruptions
 * that produced them (the block layout is deterministic too, but the digest does not rely on it).
 */
import { createHash } from 'node:crypto';
import * as path from 'node:path';
import { mergeRuns } from '../count/run-merge.ts';
import { PartitionStore, partitionStoreDir, StoreSource } from './store.ts';

export async function storeDigest(jobDir: string, orderMax: number, partitions: number): Promise<string> {
  const hash = createHash('sha256');
  const stores = Array.from({ length: partitions }, (_, p) => PartitionStore.open(path.join(jobDir, partitionStoreDir(p)), 'read'));
  try {
    for (let order = 1; order <= orderMax; order++) {
      hash.update(`order ${order}\n`);
      for await (const batch of mergeRuns(stores.map((s) => new StoreSource(s, order)), order)) {
        hash.update(new Uint8Array(batch.keys.buffer, batch.keys.byteOffset, batch.recordCount * order * 4));
        hash.update(new Uint8Array(batch.counts.buffer, batch.counts.byteOffset, batch.recordCount * 8));
      }
    }
  } finally {
    await Promise.all(stores.map((s) => s.close()));
  }
  return hash.digest('hex');
}
