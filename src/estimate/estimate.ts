/**
 * One entry point for every method: `estimate(counts, request)` with the method named in the request.
 * Interpolated modified Kneser-Ney is the default.
 */
import { estimateAbsoluteDiscounting, type AbsoluteDiscountingOptions } from './absolute-discounting.ts';
import type { CountTables } from './counts.ts';
import { estimateJelinekMercer, type JelinekMercerOptions } from './jelinek-mercer.ts';
import { estimateKatz, type KatzOptions } from './katz.ts';
import { estimateKneserNey, type KneserNeyOptions } from './kneser-ney.ts';
import type { LanguageModel, ModelMethod } from './model.ts';
import { estimateModifiedKneserNey, type ModifiedKneserNeyOptions } from './modified-kneser-ney.ts';
import { estimateStupidBackoff, type StupidBackoffOptions } from './stupid-backoff.ts';
import { estimateWittenBell, type WittenBellOptions } from './witten-bell.ts';

/** The default smoothing method. */
export const DEFAULT_METHOD = 'modified-kneser-ney' satisfies ModelMethod;

/** A method and its options. */
export type EstimateRequest =
  | ({ method?: 'modified-kneser-ney' } & ModifiedKneserNeyOptions)
  | ({ method: 'kneser-ney' } & KneserNeyOptions)
  | ({ method: 'absolute-discounting' } & AbsoluteDiscountingOptions)
  | ({ method: 'katz' } & KatzOptions)
  | ({ method: 'witten-bell' } & WittenBellOptions)
  | ({ method: 'jelinek-mercer' } & JelinekMercerOptions)
  | ({ method: 'stupid-backoff' } & StupidBackoffOptions);

/** Estimates a model from count tables by the requested method (default: modified Kneser-Ney). */
export function estimate(counts: CountTables, request: EstimateRequest = {}): LanguageModel {
  switch (request.method) {
    case undefined:
    case 'modified-kneser-ney':
      return estimateModifiedKneserNey(counts, request);
    case 'kneser-ney':
      return estimateKneserNey(counts, request);
    case 'absolute-discounting':
      return estimateAbsoluteDiscounting(counts, request);
    case 'katz':
      return estimateKatz(counts, request);
    case 'witten-bell':
      return estimateWittenBell(counts, request);
    case 'jelinek-mercer':
      return estimateJelinekMercer(counts, request);
    case 'stupid-backoff':
      return estimateStupidBackoff(counts, request);
  }
}
