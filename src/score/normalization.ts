/**
 * Which normalisation text to score gets: the one the model was trained with, as its file records
 * it, unless the user says otherwise — and saying otherwise for a model that records one is refused,
 * since text normalised unlike the training text turns known words into OOVs and inflates perplexity.
 */
import { QuernError } from '../errors.ts';
import type { NormalizeOptions } from '../corpus/types.ts';

/** The count's defaults (`quern count` without normalisation options). */
export const NORMALIZE_DEFAULTS: NormalizeOptions = { lowercase: false, unicode: 'none', split: 'space' };

/** The option of each field, for messages. */
const OPTION_OF: Record<keyof NormalizeOptions, string> = { lowercase: '--lowercase', unicode: '--unicode', split: '--split' };

/** The normalisation as options a user would type, e.g. `--lowercase --unicode nfc`. */
export function describeNormalize(normalize: NormalizeOptions): string {
  const parts = [normalize.lowercase ? '--lowercase' : '--no-lowercase', `--unicode ${normalize.unicode}`, `--split ${normalize.split}`];
  return parts.join(' ');
}

/**
 * The normalisation to score with. `recorded`: the model file's (null when it records none);
 * `given`: the options the user typed (undefined where not typed).
 * Throws QuernError 'config' when a typed option contradicts the recorded normalisation.
 */
export function resolveNormalize(recorded: NormalizeOptions | null, given: Partial<NormalizeOptions>): { normalize: NormalizeOptions; source: 'model' | 'options' } {
  if (recorded === null) return { normalize: { ...NORMALIZE_DEFAULTS, ...definedFields(given) }, source: 'options' };
  const conflicts = (Object.keys(OPTION_OF) as (keyof NormalizeOptions)[])
    .filter((key) => given[key] !== undefined && given[key] !== recorded[key])
    .map((key) => `${OPTION_OF[key]} ${String(given[key])} (the model was trained with ${String(recorded[key])})`);
  if (conflicts.length > 0) {
    throw new QuernError('config', `${conflicts.join('; ')}: text normalised unlike the training text turns known words into OOVs and raises perplexity. ` +
      `Leave the normalisation options out: the model file records ${describeNormalize(recorded)}, and text is read that way.`);
  }
  return { normalize: { ...recorded }, source: 'model' };
}

function definedFields(given: Partial<NormalizeOptions>): Partial<NormalizeOptions> {
  return Object.fromEntries(Object.entries(given).filter(([, value]) => value !== undefined)) as Partial<NormalizeOptions>;
}
