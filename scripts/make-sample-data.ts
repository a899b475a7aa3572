/**
 * Generates the sample corpus in sample-data/: the invented radio and logbook traffic of the
 * Saltmarsh Ferry Company, a coastal ferry line that does not exist. Every name, place, vessel and
 * event is made up here.
 *
 *   npm run sample               write sample-data/ (and sample-data/SHA256SUMS)
 *   npm run sample -- --check    regenerate in memory and compare with the files on disk;
 *                                exit 1 if any byte differs (nothing is written)
 *
 * The output is byte-for-byte reproducible: all randomness comes from the seeded Prng, nothing
 * reads the clock or the environment, and the gzip shard is made with zlib.gzipSync (whose header
 * has mtime 0) at a fixed level.
 *
 * What the text is built to exercise:
 *   - realistic repetition with a long, Zipf-like tail: a small template grammar whose slot fillers
 *     are drawn with Zipf-like weights, plus remarks drawn from longer word lists (many hapaxes);
 *   - mixed case and punctuation attached to words ("Quay,", "over.", "URGENT:"), so lower-casing
 *     and the choice of tokenisation change the counts;
 *   - non-ASCII words (café, naïve, Sécurité, Lønnholm, Skåre) written in NFC on some lines and in
 *     decomposed form (NFD) on others, so Unicode normalisation changes the counts;
 *   - empty and whitespace-only lines (not sentences), tabs and double spaces between words;
 *   - JSONL records whose text sits under body.text, some with several lines and blank lines, one
 *     empty, and some with a decoy text-like field under meta;
 *   - a short shard of Japanese announcements (no spaces) for per-character tokenisation.
 */
import { createHash } from 'node:crypto';
import { mkdirSync, readFileSync, renameSync, writeFileSync, existsSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync, constants as zlibConstants } from 'node:zlib';
import { Prng, zipfWeights } from './lib/prng.ts';

const OUT_DIR = resolve(dirname(fileURLToPath(import.meta.url)), '..', 'sample-data');

/** Seeds: the held-out shard uses its own seed so it shares the scenario, not the sentences. */
const SEED_TRAIN_A = 20260114;
const SEED_TRAIN_B = 20260702;
const SEED_DISPATCH = 20260301;
const SEED_ANNOUNCEMENTS_JA = 20260415;
const SEED_HELDOUT = 20261129;

/** Target sizes (uncompressed text bytes); each file stops at the first line that reaches it. */
const BYTES_TARGET_A = 560_000;
const BYTES_TARGET_B = 760_000;
const BYTES_TARGET_DISPATCH = 380_000;
const BYTES_TARGET_JA = 24_000;
const BYTES_TARGET_HELDOUT = 110_000;

/** Everything written, all below this (the brief for sample-data/ is ≤ 2 MB on disk). */
const BYTES_ON_DISK_MAX = 2_000_000;

// ---- Word lists -----------------------------------------------------------------------------------
// Lists are ordered from most to least frequent: fillers are drawn with Zipf-like weights.

const PLACES = [
  'Kestrel Quay', 'Brindle Point', 'Gullwick Harbour', 'Marram Sands', 'Tansy Island',
  'Cobble Reach', 'Fennel Creek', 'Heronsgate Pier', 'Oysterhythe', 'Larkspit', 'Wrackholm',
  'Dunlin Steps', 'Sorrel Head', 'Pennywort Bay', 'Little Tansy', 'Crakeness',
];
/** Places with non-ASCII letters (ø has no decomposition; å decomposes to a + combining ring). */
const PLACES_NON_ASCII = ['L\u00f8nnholm Pier', 'Sk\u00e5re Sound'];

const VESSELS = [
  'Marsh Wren', 'Saltwort', 'Samphire', 'Curlew', 'Godwit', 'Sea Aster', 'Brackish Belle',
  'Lugworm', 'Old Thrift',
];

const PEOPLE = [
  'Captain Pask', 'Fenwick', 'Isolde', 'Rufus', 'Hettie', 'Mr Crane', 'Wenna', 'Captain Orrin Tull',
  'Jory', 'Mags', 'Bartle', 'Sennen', 'young Ezra', 'Mrs Quill', 'Tamsin Vell', 'Ottoline',
];

const WIND_DIRECTIONS = ['southwest', 'west', 'northwest', 'south', 'north', 'east', 'northeast', 'southeast'];
const SEA_STATES = ['slight', 'moderate', 'calm', 'rough', 'smooth', 'very rough'];
const VISIBILITY = ['good', 'moderate', 'poor', 'good, occasionally moderate', 'very poor in fog patches'];
const WEATHER_EXTRAS = [
  'Showers later.', 'Rain at times.', 'Fog patches in the estuary.', 'Drizzle clearing by noon.',
  'Squally showers.', 'Fair.', 'Thundery showers possible.', 'Sea fret lifting slowly.',
];

const DELAY_REASONS = [
  'the tide', 'fog in the channel', 'a late coach', 'heavy loading', 'a fault with the ramp',
  'strong winds', 'a medical call', 'a stray dinghy in the fairway', 'the pilot boat', 'swans on the slipway',
];

const CARGO = [
  'mail sacks', 'a pallet of feed', 'two crates of oysters', 'bicycles', 'the bread van',
  'a horsebox', 'school bags', 'a coffin, respectfully', 'beehives', 'a church organ pipe',
];

/** Common words of crew talk, most frequent first; the tail holds words that turn up once or twice. */
const OBJECTS = [
  'kettle', 'radio', 'ramp', 'rope', 'fender', 'bilge pump', 'mooring line', 'chart', 'logbook',
  'tide table', 'torch', 'boathook', 'lifebuoy', 'windlass', 'galley hatch', 'wheelhouse door',
  'spare shackle', 'foghorn', 'tarpaulin', 'deck brush', 'thermos', 'gangway', 'echo sounder',
  'bollard', 'scupper', 'capstan', 'bosun chair', 'grease gun', 'sextant', 'barometer', 'kedge',
  'thole pin', 'marlinspike', 'rowlock', 'hawser', 'cleat', 'tiller', 'bilge keel', 'sea cock',
  'binnacle', 'handy-billy', 'fairlead', 'pelican hook', 'dan buoy', 'gimbal', 'cringle',
];
const ADJECTIVES = [
  'old', 'new', 'wet', 'broken', 'spare', 'rusty', 'blue', 'red', 'heavy', 'loose', 'cold',
  'greasy', 'salty', 'bent', 'squeaky', 'cracked', 'borrowed', 'missing', 'tangled', 'crooked',
  'barnacled', 'verdigrised', 'lopsided', 'waterlogged', 'frayed', 'mislaid', 'ramshackle',
  'gleaming', 'wobbly', 'fog-damp', 'sun-bleached', 'half-painted',
];
const VERBS_PAST = [
  'found', 'fixed', 'lost', 'moved', 'checked', 'painted', 'dropped', 'borrowed', 'cleaned',
  'stowed', 'spliced', 'lashed', 'tarred', 'scrubbed', 'oiled', 'mended', 'relabelled',
  'requisitioned', 'rehomed', 'unearthed',
];
const LOCATIONS = [
  'the mess', 'the wheelhouse', 'the car deck', 'the galley', 'the ticket office', 'the slipway',
  'the engine room', 'the bow locker', 'the waiting room', 'the lamp store', 'the net loft',
  'behind the bait shed', 'under the gangway',
];
/** Words that should occur only a handful of times in the whole corpus. */
const RARE_WORDS = [
  'quahog', 'sprattling', 'gloaming', 'brackwater', 'samphire-pickers', 'whelkery', 'spindrift',
  'tidewrack', 'mizzle', 'haar', 'cormorant', 'shelduck', 'avocets', 'eelgrass', 'bladderwrack',
  'crabpots', 'saltpan', 'oystercatchers', 'dabchick', 'sandpipers', 'lamprey', 'pipefish',
  'knotgrass', 'glasswort', 'sea-purslane', 'scurvygrass', 'cordgrass', 'mudflats', 'rannel',
  'fleet-dyke', 'sluice-keeper', 'causeway', 'marshlight', 'will-o-the-wisp', 'grebe', 'petrel',
];
const SNACKS = ['pasties', 'toast', 'soup', 'biscuits', 'fish and chips', 'crab sandwiches', 'flapjack', 'saffron buns'];

const NUMBER_WORDS = ['one', 'two', 'three', 'four', 'five', 'six', 'seven', 'eight', 'nine', 'ten', 'eleven', 'twelve'];
const DAY_NAMES = ['Sunday', 'Monday', 'Tuesday', 'Wednesday', 'Thursday', 'Friday', 'Saturday'];
const MONTH_NAMES = [
  'January', 'February', 'March', 'April', 'May', 'June', 'July', 'August', 'September',
  'October', 'November', 'December',
];

// ---- Helpers ----------------------------------------------------------------------------------------

/** Draws from a list ordered by frequency, with Zipf-like weights (exponent 1, small offset). */
class ZipfPicker<T> {
  private readonly cumulative: Float64Array;
  constructor(readonly items: readonly T[], exponent = 1, offset = 0.5) {
    const weights = zipfWeights(items.length, exponent, offset);
    this.cumulative = new Float64Array(items.length);
    let total = 0;
    for (let index = 0; index < items.length; index++) {
      total += weights[index];
      this.cumulative[index] = total;
    }
  }
  pick(rng: Prng): T {
    const target = rng.next() * this.cumulative[this.cumulative.length - 1];
    let low = 0;
    let high = this.cumulative.length - 1;
    while (low < high) {
      const middle = (low + high) >>> 1;
      if (this.cumulative[middle] > target) high = middle;
      else low = middle + 1;
    }
    return this.items[low];
  }
}

const placePicker = new ZipfPicker(PLACES, 0.9);
const vesselPicker = new ZipfPicker(VESSELS, 0.8);
const peoplePicker = new ZipfPicker(PEOPLE, 1.0);
const objectPicker = new ZipfPicker(OBJECTS, 1.0);
const adjectivePicker = new ZipfPicker(ADJECTIVES, 1.0);
const verbPicker = new ZipfPicker(VERBS_PAST, 1.0);
const locationPicker = new ZipfPicker(LOCATIONS, 0.9);
const delayPicker = new ZipfPicker(DELAY_REASONS, 1.1);
const cargoPicker = new ZipfPicker(CARGO, 1.2);
const windPicker = new ZipfPicker(WIND_DIRECTIONS, 0.7);
const seaPicker = new ZipfPicker(SEA_STATES, 1.0);
const visibilityPicker = new ZipfPicker(VISIBILITY, 1.0);
const weatherExtraPicker = new ZipfPicker(WEATHER_EXTRAS, 1.0);

function place(rng: Prng): string {
  return rng.chance(0.015) ? rng.pick(PLACES_NON_ASCII) : placePicker.pick(rng);
}
function otherPlace(rng: Prng, not: string): string {
  for (;;) {
    const candidate = place(rng);
    if (candidate !== not) return candidate;
  }
}
function vessel(rng: Prng): string {
  return vesselPicker.pick(rng);
}
function otherVessel(rng: Prng, not: string): string {
  for (;;) {
    const candidate = vessel(rng);
    if (candidate !== not) return candidate;
  }
}
function pad2(value: number): string {
  return value < 10 ? `0${value}` : String(value);
}
/** A timetable-ish time: mostly on the quarter hours, 05:30 to 22:45. */
function clockTime(rng: Prng): { hour: number; minute: number } {
  const hour = rng.intBetween(5, 22);
  const minute = rng.chance(0.8) ? rng.pick([0, 15, 30, 45]) : rng.int(60);
  return { hour, minute };
}
function timeColon(rng: Prng): string {
  const t = clockTime(rng);
  return `${pad2(t.hour)}:${pad2(t.minute)}`;
}
function timeRadio(rng: Prng): string {
  const t = clockTime(rng);
  return `${pad2(t.hour)}${pad2(t.minute)}`;
}
/** A spoken time for announcements: "half past nine", "ten fifteen", "noon". */
function timeSpoken(rng: Prng): string {
  const t = clockTime(rng);
  const hour12 = t.hour % 12 === 0 ? 12 : t.hour % 12;
  const hourWord = NUMBER_WORDS[hour12 - 1];
  if (t.hour === 12 && t.minute === 0) return 'noon';
  if (t.minute === 0) return `${hourWord} o'clock`;
  if (t.minute === 30) return `half past ${hourWord}`;
  if (t.minute === 15) return `quarter past ${hourWord}`;
  if (t.minute === 45) return `quarter to ${NUMBER_WORDS[hour12 % 12]}`;
  return `${hourWord} ${t.minute < 10 ? `oh ${NUMBER_WORDS[t.minute - 1] ?? 'oh'}` : t.minute}`;
}
function capitalise(text: string): string {
  return text.length === 0 ? text : text[0].toUpperCase() + text.slice(1);
}

/** Day `dayIndex` (0 = 1 January 2026), for log headers. Uses UTC only: no time zone involved. */
function dateOf(dayIndex: number): { dayName: string; day: number; monthName: string; iso: string } {
  const date = new Date(Date.UTC(2026, 0, 1) + dayIndex * 86_400_000);
  return {
    dayName: DAY_NAMES[date.getUTCDay()],
    day: date.getUTCDate(),
    monthName: MONTH_NAMES[date.getUTCMonth()],
    iso: `${date.getUTCFullYear()}-${pad2(date.getUTCMonth() + 1)}-${pad2(date.getUTCDate())}`,
  };
}

// ---- Sentence grammar -------------------------------------------------------------------------------

type Genre = 'dispatch' | 'announcement' | 'harbour' | 'weather' | 'crew';

function dispatchLine(rng: Prng, vesselOfRecord?: string): string {
  const v = vesselOfRecord ?? vessel(rng);
  const p = place(rng);
  switch (rng.weightedIndex([10, 9, 7, 6, 5, 5, 4, 3, 2, 2, 1])) {
    case 0:
      return `${v}, this is Saltmarsh Dispatch. Proceed to ${p} berth ${rng.intBetween(1, 4)}, over.`;
    case 1:
      return `Saltmarsh Dispatch, ${v} departing ${p} at ${timeRadio(rng)} with ${rng.intBetween(3, 240)} passengers and ${rng.intBetween(0, 38)} vehicles, over.`;
    case 2:
      return `Copy that, ${v}. ${p} slipway is clear, over.`;
    case 3:
      return `${v}, hold at the ${p} fairway buoy until the ${otherVessel(rng, v)} clears the channel, over.`;
    case 4:
      return `${v} running ${rng.intBetween(5, 55)} minutes late owing to ${delayPicker.pick(rng)}, ETA ${p} ${timeRadio(rng)}, over.`;
    case 5:
      return rng.pick(['Roger, out.', 'Received, out.', 'Say again, over.', 'Roger that.', 'Standing by.']);
    case 6:
      return `${v}, Dispatch. Be advised ${cargoPicker.pick(rng)} waiting on the ${p} ramp for you, over.`;
    case 7:
      return `All vessels, all vessels, this is Saltmarsh Dispatch. Wind ${windPicker.pick(rng)} ${rng.intBetween(3, 8)}, visibility ${visibilityPicker.pick(rng)}, out.`;
    case 8:
      return `URGENT: ${v.toUpperCase()} REPORTS ${rng.pick(['STEERING FAULT', 'MAN OVERBOARD DRILL COMPLETE', 'ENGINE ALARM, INVESTIGATING', 'LOST POWER TO RAMP'])} OFF ${p.toUpperCase()}.`;
    case 9:
      return `S\u00e9curit\u00e9, s\u00e9curit\u00e9, s\u00e9curit\u00e9. All stations, this is ${v}, dredger working in the ${p} approach until ${timeRadio(rng)}, out.`;
    default:
      return `${v}, Dispatch, ${rng.pick(PEOPLE)} asks whether you can take ${cargoPicker.pick(rng)} on the ${timeRadio(rng)}, over.`;
  }
}

function announcementLine(rng: Prng): string {
  const v = vessel(rng);
  const from = place(rng);
  const to = otherPlace(rng, from);
  switch (rng.weightedIndex([10, 8, 6, 5, 5, 4, 4, 3, 2, 2])) {
    case 0:
      return `Good ${rng.pick(['morning', 'afternoon', 'evening'])} and welcome aboard the ${v}, sailing from ${from} to ${to}.`;
    case 1:
      return `We expect to arrive at ${to} at approximately ${timeSpoken(rng)}.`;
    case 2:
      return 'The caf\u00e9 on the upper deck is now open for hot drinks and light snacks.';
    case 3:
      return `Passengers for ${to} are reminded to return to their vehicles when asked to do so.`;
    case 4:
      return 'Lifejackets are stowed beneath the seats. Please take a moment to read the safety card.';
    case 5:
      return `Due to ${delayPicker.pick(rng)}, the ${timeColon(rng)} sailing to ${to} is cancelled. We apologise for the inconvenience.`;
    case 6:
      return `Today's special in the caf\u00e9 is ${rng.pick(SNACKS)}, ${rng.pick(['while stocks last', 'served until we dock', 'made this morning in Oysterhythe'])}.`;
    case 7:
      return 'Please keep children and dogs away from the rails while we are under way.';
    case 8:
      return `This is your captain, ${rng.pick(['Captain Pask', 'Captain Orrin Tull'])}. We are now passing ${place(rng)}; look out to starboard for ${rng.pick(['the seals', 'the old lighthouse', 'the oyster beds', 'the wreck of the Dulcimer'])}.`;
    default:
      return `Would the owner of a ${rng.pick(['green', 'white', 'silver', 'mustard-yellow'])} ${rng.pick(['van', 'estate car', 'camper'])} please return to the car deck.`;
  }
}

function harbourLine(rng: Prng, vesselOfRecord?: string): string {
  const v = vesselOfRecord ?? vessel(rng);
  const p = place(rng);
  const t = timeColon(rng);
  switch (rng.weightedIndex([10, 9, 6, 5, 3, 3, 2, 2, 1])) {
    case 0:
      return `${t} ${v} alongside ${p} berth ${rng.intBetween(1, 4)}. Lines fast.`;
    case 1:
      return `${t} ${v} cast off from ${p}, ${rng.intBetween(3, 240)} pax, ${rng.intBetween(0, 38)} cars.`;
    case 2:
      return `${t} ${rng.pick(['High', 'Low'])} water ${p}, ${rng.intBetween(0, 5)}.${rng.int(10)} m.`;
    case 3:
      return `${t} ${v} anchored off ${p} awaiting the tide.`;
    case 4:
      return `Noted: fender damage on berth ${rng.intBetween(1, 4)} at ${p}, reported to the yard.`;
    case 5:
      return `${t} Buoy ${rng.pick(['KQ', 'BP', 'GW', 'MS', 'TI'])}${rng.intBetween(1, 12)} light unlit. Notice to mariners issued.`;
    case 6:
      return `${t} Harbour master ${rng.pick(['Mr Crane', 'Ms Ashby'])} on board ${v} for inspection. All in order.`;
    case 7:
      return `${t} ${v} refuelled at ${p}, ${rng.intBetween(2, 18) * 100} litres.`;
    default:
      return `${t} Pilot boarded ${v} off ${p}; ${rng.pick(RARE_WORDS)} noted in the approach.`;
  }
}

function weatherLine(rng: Prng): string {
  switch (rng.weightedIndex([10, 4, 3, 2, 1])) {
    case 0: {
      const from = windPicker.pick(rng);
      return `Wind ${from} ${rng.intBetween(2, 7)}, ${rng.pick(['veering', 'backing'])} ${windPicker.pick(rng)} later. Sea ${seaPicker.pick(rng)}. Visibility ${visibilityPicker.pick(rng)}. ${weatherExtraPicker.pick(rng)}`;
    }
    case 1:
      return `Fog bank lying off ${place(rng)}, visibility under ${rng.intBetween(1, 9) * 100} metres.`;
    case 2:
      return `Barometer ${rng.intBetween(985, 1032)} and ${rng.pick(['falling', 'rising', 'steady', 'falling slowly', 'rising quickly'])}.`;
    case 3:
      return `GALE WARNING ISSUED ${timeRadio(rng)} FOR SALTMARSH APPROACHES: ${windPicker.pick(rng).toUpperCase()} ${rng.intBetween(7, 9)}, SEVERE GALE ${rng.intBetween(9, 10)} LATER.`;
    default:
      return `${capitalise(rng.pick(RARE_WORDS))} over the ${rng.pick(['marsh', 'estuary', 'sands'])} at ${timeColon(rng)}; ${rng.pick(['pretty', 'odd', 'unusual', 'not seen that in years'])}.`;
  }
}

function crewLine(rng: Prng): string {
  const who = peoplePicker.pick(rng);
  switch (rng.weightedIndex([10, 8, 7, 6, 5, 4, 3, 3, 2, 2, 2, 1, 1])) {
    case 0:
      return `anyone seen the ${adjectivePicker.pick(rng)} ${objectPicker.pick(rng)}?`;
    case 1:
      return `${who} ${verbPicker.pick(rng)} the ${adjectivePicker.pick(rng)} ${objectPicker.pick(rng)} in ${locationPicker.pick(rng)}.`;
    case 2:
      return rng.pick(["kettle's on in the mess", 'cheers', 'ta', 'lol no', 'on my way', 'will do', "who's got the keys?", 'brew anyone?']);
    case 3:
      return `${who} says the ${objectPicker.pick(rng)} on the ${vessel(rng)} is playing up again`;
    case 4:
      return `${capitalise(rng.pick(SNACKS))} in the galley if anyone wants some.`;
    case 5:
      return `Heard the new timetable starts on the ${rng.intBetween(1, 28)}th. ${rng.pick(['Typical.', 'About time!', 'Nobody told me.', 'Great...'])}`;
    case 6:
      return `swapping my ${timeColon(rng)} ${place(rng)} run for anything on ${rng.pick(DAY_NAMES)}, ask ${who}`;
    case 7:
      return `${who} ${verbPicker.pick(rng)} a ${adjectivePicker.pick(rng)} ${objectPicker.pick(rng)} and a ${adjectivePicker.pick(rng)} ${objectPicker.pick(rng)} ${rng.pick(['before lunch', 'after the last sailing', 'in the rain', 'for no reason'])}.`;
    case 8:
      return `Saw ${rng.intBetween(2, 40)} ${rng.pick(RARE_WORDS)} off ${place(rng)} this morning!`;
    case 9:
      return `who left the na\u00efve seagull drawing on the chart table? ${rng.pick(['it is brilliant', 'very funny', 'framing it'])}`;
    case 10:
      return `meet at the caf\u00e9 in ${place(rng)} after the ${timeColon(rng)}?`;
    case 11:
      return `NB   ${who}\tis off sick ${rng.pick(DAY_NAMES)},  ${rng.pick(PEOPLE)} covering.`;
    default:
      return `${who}: "${rng.pick(['not again', 'told you so', 'mind the ramp', 'tide waits for nobody'])}," said the ${rng.pick(['mate', 'purser', 'engineer', 'deckhand'])}.`;
  }
}

const GENRES: readonly Genre[] = ['harbour', 'dispatch', 'crew', 'weather', 'announcement'];
const GENRE_WEIGHTS_LOGBOOK = [10, 7, 6, 3, 4];

/** One line of a genre; `vesselOfRecord` (JSONL) makes dispatch and harbour lines name that vessel. */
function lineOf(genre: Genre, rng: Prng, vesselOfRecord?: string): string {
  switch (genre) {
    case 'dispatch': return dispatchLine(rng, vesselOfRecord);
    case 'announcement': return announcementLine(rng);
    case 'harbour': return harbourLine(rng, vesselOfRecord);
    case 'weather': return weatherLine(rng);
    case 'crew': return crewLine(rng);
  }
}

/** Writes a third of the lines that hold decomposable non-ASCII letters in NFD, the rest in NFC. */
function maybeDecompose(line: string, rng: Prng): string {
  // eslint-disable-next-line no-control-regex
  if (/^[\x00-\x7f]*$/.test(line)) return line;
  return rng.chance(1 / 3) ? line.normalize('NFD') : line.normalize('NFC');
}

/**
 * A logbook shard: day headers, then a day's entries. Lines are sentences for Quern; a few lines
 * are empty or hold only white space (not sentences).
 */
function logbookText(seed: number, bytesTarget: number, dayIndexFirst: number): string {
  const rng = new Prng(seed);
  const lines: string[] = [];
  let bytes = 0;
  let dayIndex = dayIndexFirst;
  const push = (line: string): void => {
    lines.push(line);
    bytes += Buffer.byteLength(line, 'utf8') + 1;
  };
  // Deliberate edge cases near the top, so even a short read sees them.
  push(`Saltmarsh Ferry Company, harbour office logbook, from ${dateOf(dayIndex).iso}.`);
  push('');
  while (bytes < bytesTarget) {
    const date = dateOf(dayIndex);
    push(`LOG ${date.dayName} ${date.day} ${date.monthName} 2026, ${rng.pick(['Kestrel Quay', 'Gullwick Harbour', 'Brindle Point'])} office. Duty: ${rng.pick(PEOPLE)}.`);
    const entryCount = rng.intBetween(20, 60);
    for (let entry = 0; entry < entryCount; entry++) {
      const genre = rng.weighted(GENRES, GENRE_WEIGHTS_LOGBOOK);
      push(maybeDecompose(lineOf(genre, rng), rng));
    }
    // Now and then an empty or whitespace-only line between days.
    const gap = rng.weightedIndex([40, 2, 1]);
    if (gap === 1) push('');
    if (gap === 2) push(rng.pick(['   ', '\t', ' \t ']));
    dayIndex++;
  }
  push('');
  push('End of volume. Carried forward to the next logbook.');
  return lines.join('\n') + '\n';
}

/** One JSONL record per radio exchange; the text is under body.text, one line per transmission. */
function dispatchJsonl(seed: number, bytesTarget: number): string {
  const rng = new Prng(seed);
  const out: string[] = [];
  let bytes = 0;
  let id = 0;
  while (bytes < bytesTarget) {
    id++;
    const day = dateOf(rng.int(365));
    const t = clockTime(rng);
    const v = vessel(rng);
    const from = place(rng);
    const transmissions: string[] = [];
    const transmissionCount = rng.weightedIndex([4, 5, 4, 3, 2, 1]) + 1;
    for (let index = 0; index < transmissionCount; index++) {
      const genre: Genre = rng.weighted<Genre>(['dispatch', 'weather', 'crew', 'harbour'], [10, 2, 2, 1]);
      transmissions.push(maybeDecompose(lineOf(genre, rng, v), rng));
      // Blank lines inside the text: operators leave a gap between exchanges.
      if (index + 1 < transmissionCount && rng.chance(0.12)) transmissions.push(rng.chance(0.8) ? '' : '  ');
    }
    let text = transmissions.join('\n');
    if (rng.chance(0.05)) text += '\n';
    if (id === 57) text = ''; // One record with an empty text: no sentences at all.
    const meta: Record<string, unknown> = {
      channel: `VHF ${rng.pick([12, 14, 16, 67])}`,
      vessel: v,
      from,
      to: otherPlace(rng, from),
      time: `${day.iso}T${pad2(t.hour)}:${pad2(t.minute)}:00Z`,
      priority: rng.weighted(['routine', 'safety', 'urgent'], [20, 2, 1]),
    };
    // A decoy: text-like content outside body.text, which must not be counted.
    if (rng.chance(0.1)) meta.note = `operator note: ${crewLine(rng)}`;
    const record = { id: `SFC-D-${String(id).padStart(6, '0')}`, meta, body: { text, lang: 'en' } };
    const line = JSON.stringify(record);
    out.push(line);
    bytes += Buffer.byteLength(line, 'utf8') + 1;
  }
  return out.join('\n') + '\n';
}

// ---- Japanese announcements (no spaces: for per-character tokenisation) ---------------------------

const JA_COMPANY = '塩沼フェリー';
const JA_PLACES = ['ケストレル埠頭', 'ブリンドル岬', 'ガルウィック港', 'マラム砂州', 'タンジー島', 'フェンネル入江', 'ヘロンズゲート桟橋', 'オイスターハイス'];
const JA_VESSELS = ['マーシュレン号', 'ソルトワート号', 'サンファイア号', 'カーリュー号', 'ゴドウィット号'];
const JA_WEATHER = ['強風', '濃霧', '高波', '大雨', '台風の接近'];
const JA_DIGITS = ['〇', '一', '二', '三', '四', '五', '六', '七', '八', '九', '十'];

/** 1..59 in kanji numerals (十五, 三十, 四十五). */
function jaNumber(value: number): string {
  if (value <= 10) return JA_DIGITS[value];
  const tens = Math.floor(value / 10);
  const ones = value % 10;
  return `${tens === 1 ? '' : JA_DIGITS[tens]}十${ones === 0 ? '' : JA_DIGITS[ones]}`;
}
function jaTime(rng: Prng): string {
  const t = clockTime(rng);
  const half = t.hour < 12 ? '午前' : '午後';
  const hour12 = t.hour % 12 === 0 ? 12 : t.hour % 12;
  const minute = t.minute === 0 ? '' : t.minute === 30 && rng.chance(0.5) ? '半' : `${jaNumber(t.minute)}分`;
  return `${half}${jaNumber(hour12)}時${minute}`;
}

function announcementsJa(seed: number, bytesTarget: number): string {
  const placePickerJa = new ZipfPicker(JA_PLACES, 0.9);
  const rng = new Prng(seed);
  const lines: string[] = [];
  let bytes = 0;
  while (bytes < bytesTarget) {
    const p = placePickerJa.pick(rng);
    const v = rng.pick(JA_VESSELS);
    let line: string;
    switch (rng.weightedIndex([10, 8, 5, 5, 4, 4, 3, 2, 2])) {
      case 0: line = `本日も${JA_COMPANY}をご利用いただき、ありがとうございます。この船は${p}行き、${v}です。`; break;
      case 1: line = `${p}には${jaTime(rng)}に到着する予定です。`; break;
      case 2: line = `本日は${rng.pick(JA_WEATHER)}のため、${jaTime(rng)}発の${p}行きは欠航となります。`; break;
      case 3: line = 'お車でお越しのお客様は、係員の案内に従って車両甲板へお戻りください。'; break;
      case 4: line = '上部デッキのカフェは営業中です。温かいお飲み物をどうぞ。'; break;
      case 5: line = '救命胴衣は座席の下にございます。'; break;
      case 6: line = `まもなく${p}です。お忘れ物のないようご注意ください。`; break;
      case 7: line = `ただいま${p}沖で霧が発生しております。到着が${jaNumber(rng.intBetween(5, 40))}分ほど遅れる見込みです。`; break;
      default: line = `右手に見えますのは${rng.pick(['古い灯台', 'アザラシの群れ', 'カキの養殖場'])}です。`;
    }
    lines.push(line);
    bytes += Buffer.byteLength(line, 'utf8') + 1;
  }
  return lines.join('\n') + '\n';
}

// ---- Output -------------------------------------------------------------------------------------------

const README = `# Sample data

The invented radio and logbook traffic of the **Saltmarsh Ferry Company**, a coastal ferry line
that does not exist: harbour-master logs, dispatch radio exchanges, passenger announcements,
weather notes and crew chat. Every place, vessel, person and event in it is made up.

It is generated by \`npm run sample\` (scripts/make-sample-data.ts) from fixed seeds and is
byte-for-byte reproducible: running it again writes the same bytes. \`SHA256SUMS\` lists the
digests (\`cd sample-data && sha256sum -c SHA256SUMS\`), and \`npm run sample -- --check\`
regenerates everything in memory and compares it with these files without writing. (The gzip
bytes come from the zlib bundled with Node; they are checked with Node 20.)

| file | what |
| --- | --- |
| \`logbook/harbour-2026-a.txt\` | plain text, one sentence per line, January onward |
| \`logbook/harbour-2026-b.txt.gz\` | gzip, same kind of text, July onward |
| \`dispatch.jsonl\` | one JSON record per radio exchange; the text is under \`body.text\` (several lines per record, some blank lines, one empty text; some records carry a decoy \`meta.note\`) |
| \`announcements-ja.txt\` | short Japanese announcements without spaces, for per-character tokenisation |
| \`heldout/harbour-heldout.txt\` | a held-out plain shard from a different seed, for scoring |

Built in on purpose: repetition with a long Zipf-like tail of rare words; mixed case and
punctuation attached to words; non-ASCII words (café, naïve, Sécurité, Lønnholm, Skåre) in NFC on
some lines and decomposed (NFD) on others; empty and whitespace-only lines; tabs and double
spaces between words. Training on this folder should leave out \`heldout/\` (and usually
\`announcements-ja.txt\`, unless the per-character mode is wanted).
`;

interface OutputFile {
  path: string; // relative to sample-data/
  bytes: Buffer;
}

function buildOutputs(): OutputFile[] {
  const files: OutputFile[] = [
    { path: 'logbook/harbour-2026-a.txt', bytes: Buffer.from(logbookText(SEED_TRAIN_A, BYTES_TARGET_A, 0), 'utf8') },
    {
      path: 'logbook/harbour-2026-b.txt.gz',
      bytes: gzipSync(Buffer.from(logbookText(SEED_TRAIN_B, BYTES_TARGET_B, 181), 'utf8'), {
        level: 9,
        memLevel: 8,
        windowBits: 15,
        strategy: zlibConstants.Z_DEFAULT_STRATEGY,
      }),
    },
    { path: 'dispatch.jsonl', bytes: Buffer.from(dispatchJsonl(SEED_DISPATCH, BYTES_TARGET_DISPATCH), 'utf8') },
    { path: 'announcements-ja.txt', bytes: Buffer.from(announcementsJa(SEED_ANNOUNCEMENTS_JA, BYTES_TARGET_JA), 'utf8') },
    { path: 'heldout/harbour-heldout.txt', bytes: Buffer.from(logbookText(SEED_HELDOUT, BYTES_TARGET_HELDOUT, 300), 'utf8') },
    { path: 'README.md', bytes: Buffer.from(README, 'utf8') },
  ];
  const sums = files.map((file) => `${sha256(file.bytes)}  ${file.path}\n`).join('');
  files.push({ path: 'SHA256SUMS', bytes: Buffer.from(sums, 'utf8') });

  // gzip of the second shard must carry mtime 0 (bytes 4..7 of the header), or runs would differ.
  const gz = files[1].bytes;
  if (gz[0] !== 0x1f || gz[1] !== 0x8b || gz.readUInt32LE(4) !== 0) throw new Error('gzip header is not deterministic');
  const total = files.reduce((sum, file) => sum + file.bytes.length, 0);
  if (total > BYTES_ON_DISK_MAX) throw new Error(`sample data is ${total} bytes, over ${BYTES_ON_DISK_MAX}`);
  return files;
}

function sha256(bytes: Buffer): string {
  return createHash('sha256').update(bytes).digest('hex');
}

function writeAtomically(path: string, bytes: Buffer): void {
  mkdirSync(dirname(path), { recursive: true });
  const tmpPath = `${path}.tmp`;
  writeFileSync(tmpPath, bytes);
  renameSync(tmpPath, path);
}

function main(argv: string[]): number {
  const unknown = argv.filter((arg) => arg !== '--check');
  if (unknown.length > 0) {
    process.stderr.write(`make-sample-data: unknown argument ${unknown[0]} (only --check is accepted)\n`);
    return 2;
  }
  const check = argv.includes('--check');
  const files = buildOutputs();
  let differing = 0;
  for (const file of files) {
    const path = join(OUT_DIR, file.path);
    const shown = relative(process.cwd(), path);
    if (check) {
      const same = existsSync(path) && sha256(readFileSync(path)) === sha256(file.bytes);
      if (!same) differing++;
      process.stdout.write(`${same ? 'same     ' : 'DIFFERENT'} ${shown}\n`);
    } else {
      writeAtomically(path, file.bytes);
      process.stdout.write(`${String(file.bytes.length).padStart(9)}  ${shown}\n`);
    }
  }
  if (!check) {
    const total = files.reduce((sum, file) => sum + file.bytes.length, 0);
    process.stdout.write(`${String(total).padStart(9)}  total bytes\n`);
  }
  return differing === 0 ? 0 : 1;
}

process.exitCode = main(process.argv.slice(2));
