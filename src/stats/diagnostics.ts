/**
 * Diagnostics: what the statistics say about the corpus and the model to be built, in plain words,
 * each with the numbers behind it and a severity:
 *  - problem: estimation as configured cannot go on (a discount undefined or out of range);
 *  - warning: the numbers look unlike a clean natural-language corpus; worth a look;
 *  - info:    a figure worth knowing, nothing wrong.
 *
 * The thresholds below are heuristics, not laws; each says why it has its value. They live here,
 * beside the checks that read them, because they judge data rather than bound resources.
 */
import { smoothedCountOfCounts, type SimpleGoodTuringFit } from './good-turing.ts';
import { MODIFIED_KNESER_NEY_DISCOUNT_RANGE_END } from './discounts.ts';
import type { OrderReport } from './report.ts';
import { formatCount, formatDecimal, formatShare } from './render-text.ts';
import type { ZipfFit } from './zipf.ts';

/** A count-of-counts n_{r+1} counts as rising above n_r only when the rise exceeds this many
 *  standard deviations of the difference (Poisson: sqrt(n_r + n_{r+1})). Natural counts fall with
 *  r, but small n_r wobble by chance; nine values of r are checked, so each check is strict
 *  (4 standard deviations: about 3 in 100,000 one-sided under the normal approximation). */
export const DUPLICATE_RISE_Z = 4;

/** Smallest r and largest r checked for duplicated documents. A document repeated k times turns
 *  its n-grams seen once into n-grams seen k times, so repeats show in the middle counts; r = 1 is
 *  excluded (nothing below it to rise from) and above 10 n_r is too small to tell. */
export const DUPLICATE_R_MIN = 2;
/** See DUPLICATE_R_MIN. */
export const DUPLICATE_R_MAX = 10;

/** A middle count-of-counts counts as a bump above the Simple Good-Turing line when it is at least
 *  this many times the fitted value: natural data stay within a factor of about 1.5 of the line at
 *  r ≤ 10 (the log-log curve bends only gently), repeated documents push far above it. */
export const DUPLICATE_BUMP_RATIO_MIN = 2;

/** … and exceeds the fitted value by this many Poisson standard deviations (sqrt of the fitted
 *  value), so that a bump made of a handful of n-grams is not reported; strict for the same reason
 *  as DUPLICATE_RISE_Z. */
export const DUPLICATE_BUMP_Z = 4;

/** Share of distinct n-grams seen once below which the input looks pruned. About half the distinct
 *  words of a text occur once, and more of the distinct n-grams of higher orders; below a quarter
 *  the rarest n-grams have most likely been removed (a minimum count, a vocabulary cap, or
 *  n-gram-level deduplication). */
export const SINGLETON_SHARE_LOW = 0.25;

/** Share of contexts seen once above which an order has too little data: most histories of that
 *  order then predict from a single observation, so the order mostly backs off. */
export const CONTEXTS_SEEN_ONCE_SHARE_MAX = 0.5;

/** Range of the Zipf exponent typical of natural-language text (about 1 over the frequent words);
 *  outside it the tokens are probably not natural text or are tokenised unusually. */
export const ZIPF_EXPONENT_TYPICAL_MIN = 0.7;
/** See ZIPF_EXPONENT_TYPICAL_MIN. */
export const ZIPF_EXPONENT_TYPICAL_MAX = 1.3;

/** How much a finding matters (see the module comment). */
export type Severity = 'info' | 'warning' | 'problem';

/** Kind of finding; stable across releases (docs/report-schema.md lists each with its values). */
export type DiagnosticCode =
  | 'discount-undefined'
  | 'discount-out-of-range'
  | 'duplicated-documents'
  | 'few-singletons'
  | 'sparse-contexts'
  | 'sgt-slope'
  | 'sgt-unavailable'
  | 'zipf-exponent'
  | 'unseen-mass';

/** One finding of the report. */
export interface Diagnostic {
  code: DiagnosticCode;
  severity: Severity;
  /** The order it concerns; null when it concerns the whole corpus. */
  order: number | null;
  /** One line naming the finding. */
  title: string;
  /** What was found, in plain words with its numbers. */
  message: string;
  /** What estimation will do about it; null when nothing. */
  action: string | null;
  /** The numbers behind the finding, by name (null for an undefined value). */
  values: Record<string, number | null>;
}

const SEVERITY_RANK: Record<Severity, number> = { problem: 0, warning: 1, info: 2 };

const DISCOUNT_ACTION = (method: string): string =>
  `Estimation with ${method} stops at this order and asks for explicit discounts or the documented fallback.`;

/** Discounts that cannot be used: undefined ones and ones outside their valid range. */
function discountDiagnostics(report: OrderReport): Diagnostic[] {
  const found: Diagnostic[] = [];
  const { order } = report;
  const add = (method: string, source: string, undefinedOnes: string[], outOfRange: string[], values: Record<string, number | null>): void => {
    if (undefinedOnes.length > 0) {
      found.push({
        code: 'discount-undefined',
        severity: 'problem',
        order,
        title: `Order ${order}: discounts for ${method} undefined`,
        message: `From the ${source} counts of order ${order}: ${undefinedOnes.join('; ')}.`,
        action: DISCOUNT_ACTION(method),
        values,
      });
    }
    if (outOfRange.length > 0) {
      found.push({
        code: 'discount-out-of-range',
        severity: 'problem',
        order,
        title: `Order ${order}: discounts for ${method} out of range`,
        message: `From the ${source} counts of order ${order}: ${outOfRange.join('; ')}.`,
        action: DISCOUNT_ACTION(method),
        values,
      });
    }
  };

  const kn = report.discounts.modifiedKneserNey;
  const knOut: string[] = [];
  for (const [name, label] of [['d1', 'D1'], ['d2', 'D2'], ['d3Plus', 'D3+']] as const) {
    const value = kn[name];
    const end = MODIFIED_KNESER_NEY_DISCOUNT_RANGE_END[name];
    if (value !== null && (value <= 0 || value >= end)) {
      knOut.push(`${label} = ${formatDecimal(value)} is ${value <= 0 ? 'not above 0' : `not below ${end}, the count it discounts`}`);
    }
  }
  add('modified Kneser-Ney', report.discounts.kneserNeySource, kn.notes, knOut, {
    n1: kn.n1, n2: kn.n2, n3: kn.n3, n4: kn.n4, D1: kn.d1, D2: kn.d2, 'D3+': kn.d3Plus,
  });

  const absolute = report.discounts.absolute;
  const absoluteOut: string[] = [];
  if (absolute.discount !== null && absolute.discount <= 0) absoluteOut.push(`D = ${formatDecimal(absolute.discount)} is not above 0 (n1 = 0)`);
  if (absolute.discount !== null && absolute.discount >= 1) absoluteOut.push(`D = ${formatDecimal(absolute.discount)} is not below 1, the count it discounts (n2 = 0)`);
  add('absolute discounting', 'raw', absolute.note === null ? [] : [`D is undefined: ${absolute.note}`], absoluteOut, {
    n1: absolute.n1, n2: absolute.n2, D: absolute.discount,
  });

  const katz = report.discounts.katz;
  const katzUndefined = katz.discounts.filter((d) => d.ratio === null).map((d) => `d${d.r} is undefined: ${d.note}`);
  const katzOut = katz.discounts
    .filter((d) => d.ratio !== null && (d.ratio <= 0 || d.ratio > 1))
    .map((d) => `d${d.r} = ${formatDecimal(d.ratio as number)} is ${(d.ratio as number) <= 0 ? 'not above 0 (the whole count would be taken)' : 'above 1 (the count would grow)'}`);
  const katzValues: Record<string, number | null> = { A: katz.cutoffShare };
  for (const d of katz.discounts) katzValues[`d${d.r}`] = d.ratio;
  add('Katz back-off', 'raw', katzUndefined, katzOut, katzValues);
  return found;
}

/** Rises of n_r with r, and bumps above the Simple Good-Turing line, at the highest order. */
function duplicateDiagnostic(report: OrderReport): Diagnostic | null {
  const listed = report.raw.listed;
  const signs: string[] = [];
  const values: Record<string, number | null> = {};
  for (let r = DUPLICATE_R_MIN; r < DUPLICATE_R_MAX; r++) {
    const nR = listed[r - 1];
    const nNext = listed[r];
    if (nNext > nR && nNext - nR > DUPLICATE_RISE_Z * Math.sqrt(nNext + nR)) {
      signs.push(`n${r + 1} = ${formatCount(nNext)} is above n${r} = ${formatCount(nR)}`);
      values[`n${r}`] = nR;
      values[`n${r + 1}`] = nNext;
    }
  }
  const sgt = report.simpleGoodTuring;
  if (sgt.status === 'fitted') {
    for (const row of sgt.rows) {
      if (row.r < DUPLICATE_R_MIN || row.r > DUPLICATE_R_MAX) continue;
      const fitted = smoothedCountOfCounts(sgt as SimpleGoodTuringFit, row.r);
      if (row.z >= DUPLICATE_BUMP_RATIO_MIN * fitted && row.z - fitted > DUPLICATE_BUMP_Z * Math.sqrt(fitted)) {
        signs.push(`n${row.r} = ${formatCount(row.nR)} is ${formatDecimal(row.z / fitted, 2)} times the fitted line (${formatDecimal(fitted)})`);
        values[`n${row.r}`] = row.nR;
        values[`fitted${row.r}`] = fitted;
      }
    }
  }
  if (signs.length === 0) return null;
  return {
    code: 'duplicated-documents',
    severity: 'warning',
    order: report.order,
    title: `Order ${report.order}: signs of duplicated documents`,
    message:
      `More ${report.order}-grams were seen a few times than a natural corpus gives: ${signs.join('; ')}. ` +
      'Repeated documents or boilerplate turn n-grams seen once into n-grams seen as often as the repeats; ' +
      'counts and discounts then describe the copies rather than the language.',
    action: null,
    values,
  };
}

/** Too few n-grams seen once: the input looks pruned or deduplicated. */
function singletonDiagnostic(report: OrderReport): Diagnostic | null {
  const [n1, n2] = report.raw.listed;
  const share = report.raw.singletonShare;
  if (share === null) return null;
  const signs: string[] = [];
  if (n1 < n2) signs.push(`fewer n-grams were seen once (n1 = ${formatCount(n1)}) than twice (n2 = ${formatCount(n2)})`);
  if (share < SINGLETON_SHARE_LOW) signs.push(`only ${formatShare(share)} of the distinct n-grams were seen once, where about half or more is usual`);
  if (signs.length === 0) return null;
  return {
    code: 'few-singletons',
    severity: 'warning',
    order: report.order,
    title: `Order ${report.order}: too few n-grams seen once`,
    message:
      `At order ${report.order} ${signs.join(', and ')}. The input looks pruned (a minimum count or a vocabulary cap) ` +
      'or deduplicated; Good-Turing and Kneser-Ney estimates read n1 and will be off.',
    action: null,
    values: { n1, n2, singletonShare: share },
  };
}

/** Most contexts seen once: too little data for the order. */
function contextsDiagnostic(report: OrderReport): Diagnostic | null {
  const contexts = report.contexts;
  if (contexts === null || contexts.seenOnceShare === null || contexts.seenOnceShare <= CONTEXTS_SEEN_ONCE_SHARE_MAX) return null;
  const seenOnce = contexts.countOfCounts.listed[0];
  return {
    code: 'sparse-contexts',
    severity: 'warning',
    order: report.order,
    title: `Order ${report.order}: too little data for this order`,
    message:
      `${formatShare(contexts.seenOnceShare)} of the ${formatCount(contexts.countOfCounts.types)} distinct ${report.order - 1}-word contexts ` +
      `were seen once (${formatCount(seenOnce)}), so most predictions at order ${report.order} rest on a single observation ` +
      'and the model will mostly back off to the order below. More text, or a lower order, fits this corpus better.',
    action: null,
    values: { contexts: contexts.countOfCounts.types, contextsSeenOnce: seenOnce, seenOnceShare: contexts.seenOnceShare },
  };
}

/** Simple Good-Turing slope above −1, or no fit at all. */
function sgtDiagnostic(report: OrderReport): Diagnostic | null {
  const sgt = report.simpleGoodTuring;
  if (sgt.status === 'unavailable') {
    return {
      code: 'sgt-unavailable',
      severity: 'info',
      order: report.order,
      title: `Order ${report.order}: no Simple Good-Turing fit`,
      message: `No Simple Good-Turing fit at order ${report.order}: ${sgt.reason}.`,
      action: null,
      values: { distinctCounts: report.raw.pairs.length },
    };
  }
  if (!sgt.slopeWarning) return null;
  return {
    code: 'sgt-slope',
    severity: 'warning',
    order: report.order,
    title: `Order ${report.order}: Simple Good-Turing slope above −1`,
    message:
      `The fitted slope of log Z_r against log r is b = ${formatDecimal(sgt.slope)}, above −1. ` +
      'Simple Good-Turing needs b < −1 (Gale & Sampson 1995); its smoothed estimates at this order are unreliable.',
    action: null,
    values: { slope: sgt.slope, intercept: sgt.intercept },
  };
}

/** The Zipf exponent of the unigram counts. */
function zipfDiagnostic(zipf: ZipfFit | null): Diagnostic {
  if (zipf === null) {
    return {
      code: 'zipf-exponent',
      severity: 'info',
      order: 1,
      title: 'Word frequencies: no Zipf fit',
      message: 'Fewer than two words have a count, so no Zipf exponent can be fitted.',
      action: null,
      values: { exponent: null },
    };
  }
  const typical = zipf.exponent >= ZIPF_EXPONENT_TYPICAL_MIN && zipf.exponent <= ZIPF_EXPONENT_TYPICAL_MAX;
  return {
    code: 'zipf-exponent',
    severity: typical ? 'info' : 'warning',
    order: 1,
    title: `Word frequencies: Zipf exponent ${formatDecimal(zipf.exponent, 3)}`,
    message:
      `Over the ${formatCount(zipf.ranksFitted)} most frequent words, count falls as rank^−${formatDecimal(zipf.exponent, 3)} ` +
      `(R² = ${formatDecimal(zipf.rSquared, 3)}). ` +
      (typical
        ? 'That is usual for natural-language text (about 1).'
        : `Natural-language text gives ${ZIPF_EXPONENT_TYPICAL_MIN}–${ZIPF_EXPONENT_TYPICAL_MAX}; check the tokenisation and that the input is text.`),
    action: null,
    values: { exponent: zipf.exponent, ranksFitted: zipf.ranksFitted, rSquared: zipf.rSquared },
  };
}

/** Good-Turing unseen mass n1/N of every order, in one finding. */
function unseenMassDiagnostic(orders: OrderReport[]): Diagnostic {
  const values: Record<string, number | null> = {};
  const parts: string[] = [];
  for (const report of orders) {
    values[`order${report.order}`] = report.unseenMass;
    parts.push(`order ${report.order}: ${report.unseenMass === null ? 'undefined (no n-grams)' : formatShare(report.unseenMass)}`);
  }
  return {
    code: 'unseen-mass',
    severity: 'info',
    order: null,
    title: 'Good-Turing mass of unseen n-grams',
    message: `Share of the next n-grams expected to be new, n1/N by order — ${parts.join(', ')}.`,
    action: null,
    values,
  };
}

/**
 * All diagnostics of a report, most severe first (then by order, corpus-wide ones first).
 * Duplicated documents are looked for at the highest order, where repeats stand out most.
 */
export function diagnose(orders: OrderReport[], zipf: ZipfFit | null): Diagnostic[] {
  const found: Diagnostic[] = [];
  for (const report of orders) {
    found.push(...discountDiagnostics(report));
    const singletons = singletonDiagnostic(report);
    if (singletons !== null) found.push(singletons);
    const contexts = contextsDiagnostic(report);
    if (contexts !== null) found.push(contexts);
    const sgt = sgtDiagnostic(report);
    if (sgt !== null) found.push(sgt);
  }
  if (orders.length > 0) {
    const duplicates = duplicateDiagnostic(orders[orders.length - 1]);
    if (duplicates !== null) found.push(duplicates);
  }
  found.push(zipfDiagnostic(zipf));
  found.push(unseenMassDiagnostic(orders));
  return found
    .map((diagnostic, index) => ({ diagnostic, index }))
    .sort((a, b) =>
      SEVERITY_RANK[a.diagnostic.severity] - SEVERITY_RANK[b.diagnostic.severity] ||
      (a.diagnostic.order ?? 0) - (b.diagnostic.order ?? 0) ||
      a.index - b.index)
    .map(({ diagnostic }) => diagnostic);
}
