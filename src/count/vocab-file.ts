/**
 * The job's vocabulary file (vocab.tsv, and vocab.previous.tsv while inputs are being added), read
 * back and checked against the sha256 job.json recorded when it was written: by the main thread,
 * and by a count worker that reads a chunk from its text.
 */
import { createHash } from 'node:crypto';
import { promises as fsp } from 'node:fs';
import { QuernError } from '../errors.ts';
import { parseVocabulary, type Vocabulary } from '../corpus/vocabulary.ts';

export const VOCAB_FILE = 'vocab.tsv';
export const PREVIOUS_VOCAB_FILE = 'vocab.previous.tsv';

/** Reads a vocabulary file whose sha256 must be `sha256` (undefined: none was recorded). */
export async function readVocabularyFile(file: string, sha256: string | undefined): Promise<Vocabulary> {
  const bytes = await fsp.readFile(file).catch((cause) => {
    throw new QuernError('io', `cannot read ${file}: ${(cause as Error).message}`, { cause });
  });
  if (createHash('sha256').update(bytes).digest('hex') !== sha256) {
    throw new QuernError('corrupt', `${file} does not match the checksum recorded in job.json; re-run the count with --restart`);
  }
  return parseVocabulary(bytes.toString('utf8'), file);
}
