/** sha256 of a file, streamed (benchmarks compare outputs of gigabytes byte for byte by it). */
import { createHash } from 'node:crypto';
import { createReadStream } from 'node:fs';

export async function fileDigest(file: string): Promise<string> {
  const hash = createHash('sha256');
  for await (const chunk of createReadStream(file)) hash.update(chunk as Buffer);
  return hash.digest('hex');
}
