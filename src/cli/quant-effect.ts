/**
 * What quantisation costs a model on held-out text (`quern info MODEL --heldout TEXT`): the model's
 * held-out perplexity with its values as stored, and, for a file of floats, with the 16-bit and 8-bit
 * codes `quern pack --quant` would give them. Each coded variant is packed from the file's own values
 * (`toModelSource`, codebooks fitted as the writer fits them) into a temporary file beside it, scored
 * like `quern score` scores text, and deleted.
 */
import { rm } from 'node:fs/promises';
import os from 'node:os';
import { stageFs } from '../job/fsio.ts';
import { ENCODING_NAMES } from '../pack/format.ts';
import { openModel, type PackedModel } from '../pack/reader.ts';
import { trackTemporary, untrackTemporary } from '../pack/temporaries.ts';
import { packModelSource } from '../pack/writer.ts';
import { resolveNormalize } from '../score/normalization.ts';
import { silentProgress } from '../job/context.ts';
import { SCORE_CHUNK_BYTES } from '../limits.ts';
import { withPackCleanup } from './pack-signals.ts';
import { scoreInputs } from './score.ts';

/** The held-out perplexity of one way of storing the values. */
export interface StoredValues {
  /** 'float32', 'float64', '16-bit quantised' or '8-bit quantised'. */
  values: string;
  /** The file's bytes per n-gram with these values. */
  bytesPerNgram: number;
  perplexity: number;
  perplexityWithUnk: number;
}

export interface QuantEffect {
  heldout: string[];
  sentences: number;
  tokens: number;
  oov: number;
  /** As stored first, then the coded variants (none for a file of codes). */
  variants: StoredValues[];
}

/** Scores `heldout` with `model` (opened `{ shared: true }`, for the scoring threads) as stored and,
 *  for a file of floats, with 16- and 8-bit codes. */
export async function measureQuantEffect(model: PackedModel, heldout: string[], notice: (line: string) => void): Promise<QuantEffect> {
  const ngrams = model.ngrams.reduce((sum, rows) => sum + rows, 0);
  const { normalize } = resolveNormalize(model.normalize, {});
  const workers = os.availableParallelism();
  const scoreWith = async (scored: PackedModel) =>
    (await scoreInputs(scored, heldout, { normalize, textField: undefined, skipBad: false, format: undefined, workers, chunkBytes: SCORE_CHUNK_BYTES, progress: silentProgress })).total;
  const stored = await scoreWith(model);
  const effect: QuantEffect = {
    heldout, sentences: stored.sentences, tokens: stored.tokens, oov: stored.oov,
    variants: [{ values: model.encodingName, bytesPerNgram: model.fileBytes / ngrams, perplexity: stored.perplexity, perplexityWithUnk: stored.perplexityWithUnk }],
  };
  if (model.encodingName.endsWith('quantised')) return effect;
  for (const quantBits of [16, 8] as const) {
    const file = `${model.filePath}.${process.pid}.q${quantBits}.tmp-model`;
    notice(`quern: packing ${model.filePath} with ${quantBits}-bit codes into ${file} to score it\n`);
    trackTemporary(file);
    try {
      // Ctrl-C while the variant is packed or scored deletes it (it is a tracked temporary).
      const { summary, totals } = await withPackCleanup(file, async () => {
        const packed = await packModelSource(model.toModelSource(), { fingerprint: model.fingerprint, quantBits }, stageFs(), file);
        return { summary: packed, totals: await scoreWith(await openModel(file, { shared: true })) };
      });
      effect.variants.push({ values: ENCODING_NAMES[summary.encoding], bytesPerNgram: summary.bytes / ngrams, perplexity: totals.perplexity, perplexityWithUnk: totals.perplexityWithUnk });
    } finally {
      await rm(file, { force: true });
      untrackTemporary(file);
    }
  }
  return effect;
}

/** The lines `quern info --heldout` adds. */
export function formatQuantEffect(effect: QuantEffect): string {
  const [stored, ...coded] = effect.variants;
  const change = (value: number): string => `${value >= stored.perplexity ? '+' : ''}${((100 * (value - stored.perplexity)) / stored.perplexity).toFixed(2)} %`;
  const lines = [
    `held-out     ${effect.heldout.join(', ')}: ${effect.sentences.toLocaleString('en-US')} sentences, ${effect.tokens.toLocaleString('en-US')} tokens (${effect.oov.toLocaleString('en-US')} OOV)`,
    `             perplexity ${stored.perplexity.toFixed(3)} with the values as stored (${stored.values}, ${stored.bytesPerNgram.toFixed(2)} bytes per n-gram)`,
    ...coded.map((variant) => `             perplexity ${variant.perplexity.toFixed(3)} with ${variant.values.replace(' quantised', ' codes')} (${change(variant.perplexity)}; ${variant.bytesPerNgram.toFixed(2)} bytes per n-gram)`),
  ];
  return lines.join('\n') + '\n';
}
