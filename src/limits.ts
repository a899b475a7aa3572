/**
 * Every limit of Quern in one place, each with the reason for its value. Relations between
 * limits are asserted at load time (bottom of the file).
 */
import { assert } from './errors.ts';

// ---- Shared -------------------------------------------------------------------------------

/** Highest n-gram order accepted. 7 covers every use we know of; keys stay ≤ 28 bytes. */
export const ORDER_MAX = 7;

/** Word ids are uint32; the top ids are reserved so a vocabulary can never reach them. */
export const VOCAB_TYPES_MAX = 0xffff_fff0;

// ---- Corpus (reading, chunking, tokenising) -------------------------------------------------

/** Bytes hashed from each end of an input for its fingerprint: cheap even for a 100 GB shard. */
export const FINGERPRINT_EDGE_BYTES = 1 << 20;

/** Target size of a chunk of a plain input: large enough to amortise a spill per chunk,
 *  small enough that both cores stay busy on a single 200 MB shard and a lost chunk is cheap. */
export const CHUNK_BYTES_TARGET = 32 << 20;

/** Read block size for streaming readers. */
export const READ_BLOCK_BYTES = 1 << 20;

/** Longest line accepted (bytes). Beyond this a "line" is almost surely binary or a missing
 *  newline; it is reported as bad input rather than growing a buffer without bound. */
export const LINE_BYTES_MAX = 64 << 20;

/** Skipped-line examples kept per input file for the report; the count is always exact. */
export const SKIPPED_SAMPLES_PER_FILE_MAX = 20;

/** Inputs opened at once while discovering (magic bytes, fingerprint). Enough to hide disk
 *  latency; far below the usual 1024 open-file limit even with a directory of 100,000 shards. */
export const DISCOVER_FILES_OPEN_MAX = 16;

/** Highest load factor of a word table (corpus/word-table.ts). Lower than the counters' 0.7:
 *  a word table is small (one entry per word type) and looked up once per token, so short probe
 *  chains are worth the space. */
export const WORD_TABLE_LOAD_MAX = 0.5;

/** Initial slots of a word table (power of two); it doubles as words arrive. */
export const WORD_TABLE_SLOTS_MIN = 1 << 12;

/** Bytes of text the WebAssembly word scan (corpus/word-memory.ts) takes at once: a read block's
 *  lines are copied into its memory this many bytes of whole lines at a time (a longer line whole),
 *  small enough to be still in the second-level cache when scanned. Its output arrays hold the most
 *  tokens and sentences so many bytes can hold (one per 2 bytes): 1.75 MiB for all of them. */
export const WORD_SCAN_PIECE_BYTES = 256 << 10;

/** Bytes read per step when the planner scans forward from a target offset to the next '\n'.
 *  Lines are short, so one small read almost always finds it; no need to read a whole block. */
export const PLAN_SCAN_BLOCK_BYTES = 64 << 10;

// ---- Count (counters, spills, run files) -----------------------------------------------------

/** Partitions of the n-gram space (by a hash of the context's last word, see count/hash.ts). Each partition is an independent
 *  merge/estimate task; 16 keeps two cores busy with room for uneven partitions. */
export const PARTITIONS_DEFAULT = 16;
export const PARTITIONS_MAX = 4096;

/** Records per run-file block. With ids ranked by frequency an order-3 record codes to 4–8 bytes,
 *  so a block is about 32–64 KiB: its header, first n-gram and checksum cost < 0.1 %, and a reader
 *  needs only one block in memory at a time. */
export const RUN_BLOCK_RECORDS_MAX = 8192;

/** Bytes of one coded run-file record at most: the shared-prefix byte, ORDER_MAX ids of ≤ 5 varint
 *  bytes each (32 bits / 7), and a count of ≤ 8 varint bytes (53 bits / 7). */
export const RUN_RECORD_BYTES_MAX = 1 + 5 * ORDER_MAX + 8;

/** Bytes of one run-file block at most (header, first n-gram, records): bounds every block-length
 *  field a reader trusts, so a damaged length can never make it allocate more than this. */
export const RUN_BLOCK_BYTES_MAX = 12 + 4 * ORDER_MAX + RUN_BLOCK_RECORDS_MAX * RUN_RECORD_BYTES_MAX;

/** Read buffer of one run reader: holds the largest possible block; a merge of 256 runs then
 *  needs 128 MiB of read buffers, and typical ~64 KiB blocks take 8 blocks per read call. */
export const RUN_READ_BUFFER_BYTES = 512 << 10;

/** Write buffer of the run writer: encoded blocks collect here, so a spill writes in 1 MiB calls. */
export const RUN_WRITE_BUFFER_BYTES = 1 << 20;

/** Largest count (and sum of counts) in a run file: counts are JS numbers, exact up to 2^53 − 1. */
export const RUN_COUNT_MAX = Number.MAX_SAFE_INTEGER;

/** Distinct n-grams per batch yielded by the k-way merge of runs: one block's worth, so a merge
 *  batch is ~160 KiB at order 3 and downstream writers get large, regular units. */
export const MERGE_BATCH_RECORDS = 8192;

/** Runs one merge reads at once (sources: files, and a partition's local continuation counts).
 *  A partition with more runs of an order — a corpus of more than this many chunks, or budget
 *  spills — first merges them, this many at a time, into intermediate runs (count/fan-in.ts).
 *  Each open run holds a file descriptor, its read buffer (RUN_READ_BUFFER_BYTES) and a decoded
 *  batch (MERGE_BATCH_RECORDS rows, 0.22 MiB at order 5): ~0.75 MiB a run, so 64 come to ~48 MiB
 *  (computed from these sizes, not measured), inside a worker's fixed overhead
 *  (WORKER_OVERHEAD_BYTES), and two workers stay far below the usual limit of 1,024 open files.
 *  Without the bound, 306 runs per partition (20 MB in 64 KiB chunks) stopped the merge with EMFILE
 *  under a limit of 256 open files (at 1,024 and two workers, ~500 runs each: a corpus of ~16 GB in
 *  32 MiB chunks), and those buffers grew with the number of runs, outside the budget. */
export const MERGE_FAN_IN_MAX = 64;

/** Rows of a source the WebAssembly merge (src/count/merge-tree-wasm.ts) holds at once: its copy of
 *  a block is made this many rows at a time, so a merge of k sources of order n holds
 *  k × 1,024 × (4n + 8) bytes of them (28 KiB per source at order 5) besides its output batch of
 *  MERGE_BATCH_RECORDS rows (224 KiB at order 5). */
export const MERGE_WINDOW_RECORDS = 1024;


assert(RUN_READ_BUFFER_BYTES >= RUN_BLOCK_BYTES_MAX, 'a run reader buffer holds the largest block');
assert(RUN_WRITE_BUFFER_BYTES >= 64 + RUN_BLOCK_BYTES_MAX + 32, 'a run writer buffer holds header, one block and trailer');

// ---- Counters and memory (count workers) -----------------------------------------------------

/** Highest load factor of a counter table before it grows or spills: linear probing stays at
 *  about 2 probes per lookup up to 0.7. */
export const COUNTER_LOAD_MAX = 0.7;

/** Initial slots of a counter table (power of two): small, so 7 orders × many workers start cheap. */
export const COUNTER_SLOTS_MIN = 1 << 12;

/** Initial log capacity (rows) of a counter of order ≥ 2 (count/counter.ts): 4,096 rows of at most
 *  32 bytes, like the table. */
export const COUNTER_LOG_ROWS_MIN = 1 << 12;

/** Positions (n-grams of each order) a count worker hands its counters at once (CounterSet.
 *  addSentences, which goes order by order over them): 16,384 keep the running hashes and the
 *  batch's ids (64 KiB each) in the second-level cache beside one order's filter; a budget too
 *  small for a batch's room is still used sentence by sentence. */
export const COUNTER_BATCH_POSITIONS = 1 << 14;

/** Seen-filter bits per log row of a counter of order ≥ 2, at least (rounded up to a power of two:
 *  4 to 8). With b bits per n-gram a filter with one hash function sends about 1 − e^(−1/b) of new
 *  n-grams (22 % at 4 bits, 12 % at 8) to the table instead of the log — a cost, never an error.
 *  Measured by scripts/bench-hot-path.ts: a filter that stays in the caches matters more than its
 *  rate; at 16 bits per n-gram counting was slower than at 4–8. */
export const COUNTER_FILTER_BITS_PER_ENTRY = 4;

/** Largest vocabulary (ids) for which a spill looks partitions up in a table of every id's
 *  (spill-sort.ts): 2 bytes an id, 8 MiB at most per worker, within its fixed overhead; above it
 *  each row's partition is hashed. */
export const PARTITION_TABLE_IDS_MAX = 1 << 22;

/** Distinct n-grams per occurrence, as a count worker's last spill of an order found them, from
 *  which that order's counter is append-only (counter.ts): every occurrence a row of the log, no
 *  filter or table. In 32 MiB chunks of the benchmark corpus the share is 0.45 at order 2, 0.75 at
 *  3, 0.89 at 4 and 0.95 at 5; appending orders 3 to 5 made the count stage ~0.9× as long at order 5
 *  (BENCHMARKS.md). Order 2 as well gained nothing while the spill sort ran in JavaScript (0.6 and
 *  order 3 then); with the sort in WebAssembly it made the count stage 0.86–0.88× as long
 *  (2026-12-05), so 0.4 takes it in. */
export const COUNTER_APPEND_DISTINCT_MIN = 0.4;

/** The order from which a count worker's counters start append-only, before any spill has shown
 *  their share of distinct n-grams: in text most bigrams of a chunk are seen once or twice, and the
 *  sort adds them up faster than a table does (COUNTER_APPEND_DISTINCT_MIN). */
export const COUNTER_APPEND_ORDER_MIN = 2;

/** A counter structure (table, log, filter) more than this many times larger than the next chunk
 *  is expected to need is shrunk before the chunk (CounterSet.presize): clearing a table or a
 *  filter and finding a table's entries at a spill cost time in proportion to its size, which
 *  matters for many small chunks after a large one. Below this factor a structure is kept, so
 *  ordinary variation never reallocates. */
export const COUNTER_PRESIZE_SHRINK_FACTOR = 8;

/** Run files a spill writes at once (count/spill.ts). Each is fsynced, with its directory, before
 *  the next starts in its lane; eight lanes overlap the syncs (48 small files took 164 ms one by
 *  one and 43 ms sixteen at a time here) while each in-flight writer's buffer (≤ 1 MiB,
 *  RUN_WRITE_BUFFER_BYTES) stays within the worker's fixed overhead. */
export const SPILL_FILES_WRITING_MAX = 8;

/** Estimated bytes per vocabulary type held by each worker, charged against `--memory` before the
 *  counters get theirs: the word as a string (~40–50 B), its word-table slots and record (~35–50 B
 *  at a load of 0.25–0.5) and its id (4 B). The dense unigram counter (4 B per id, and its spill
 *  scratch) is charged to the counters. */
export const VOCAB_BYTES_PER_TYPE = 120;

/** Memory kept outside the counting budget: Node's heap and code per thread (the floor of a quern
 *  process that does nothing is 112 MiB here), the main thread's vocabulary, read buffers, LMDB's
 *  mapped pages while merging, garbage V8 has not yet collected. Measured by `npm run bench:rss`
 *  (20 MB corpus, 151,733 types, order 5): at a 128 MiB budget, peak RSS was 280 MiB above it
 *  with 1 worker and 337 MiB with 2; DEVELOPERS.md states the bound. */
export const PROCESS_OVERHEAD_BYTES = 256 << 20;
/** Per worker: its thread's heap and code, and what the merge and continuation stages hold per
 *  partition, where the peak comes (RSS sampled every 0.5 s: anonymous memory, not LMDB's mapped
 *  pages). 64 MiB held up to 2 workers, but not beyond: the 200 MB corpus, order 3, --memory
 *  256MiB, 4 and 8 workers peaked at 807 and 1,303 MiB (plain shards) and 826 and 1,255 MiB (one
 *  gzip file); the 20 MB corpus, order 5, 8 workers, at 1,066 MiB in its continuation stage: up to
 *  99 MiB a worker beyond the process's 256 (bench:rss and an RSS trace, 2026-12-03). */
export const WORKER_OVERHEAD_BYTES = 128 << 20;

/** Smallest counting budget per worker that still makes progress. */
export const WORKER_COUNTER_BYTES_MIN = 4 << 20;

/** Default `--memory`: a quarter of the machine, at least 1 GiB. */
export const MEMORY_DEFAULT_FRACTION = 0.25;

/** Spill numbers of runs re-keyed after an addition start at generation × this, so their file
 *  names never collide with earlier runs of the same chunk (a chunk spills far fewer times). */
export const REMAP_SPILL_STRIDE = 100_000;

// ---- Count store (LMDB) ----------------------------------------------------------------------

/** N-grams per LMDB value: one entry per n-gram writes at ~0.6 M/s here, blocks of ~1,000 at over
 *  6 M/s (DESIGN.md), and a lookup still decodes only one small block. */
export const STORE_BLOCK_RECORDS = 1024;

/** Blocks per write transaction: ~1 M n-grams, so the per-commit fsync is amortised while a crash
 *  loses at most a few seconds of merging. */
export const STORE_TXN_BLOCKS = 1024;

/** Word ids up to which a partition's raw merge keeps N1+(• x) of every unigram x as it merges the
 *  partition's bigrams, one u32 per id (suffix-vector.ts): 2^24 ids, 64 MiB at most per merging
 *  worker. A vocabulary larger than this takes the continuation stage's emit-and-merge path for
 *  order 1 instead. */
export const SUFFIX_VECTOR_IDS_MAX = 2 ** 24;

/** LMDB map size of one partition's environment (address space, not disk: the file grows as
 *  needed). 1 TiB per partition leaves room for any corpus this machine can count. */
export const STORE_MAP_BYTES = 2 ** 40;

/** Address space a process needs for the count store: the environments it may have open at once
 *  (a worker's, the main thread's, a reader's), each mapping STORE_MAP_BYTES, with room for V8's
 *  own reservations. Under a lower `ulimit -v` LMDB's map fails inside lmdb-js, which then crashes
 *  the process (a segmentation fault, measured at 8, 16, 32 and 64 GB); quern refuses first. */
export const STORE_ADDRESS_SPACE_MIN = 16 * STORE_MAP_BYTES;

// ---- Estimate (streaming, partition by partition) ---------------------------------------------

/** Rows per block of an estimate result file (docs/estimate-files.md): like a run-file block, a
 *  reader needs one block in memory (≤ 8,192 × (1 + 5·order + 8) bytes ≈ 360 KiB at order 7). */
export const RESULT_BLOCK_ROWS = 8192;

/** Bytes of each buffer a result writer encodes its blocks into, written whole and then reused for
 *  later blocks (a fresh buffer per block cost an allocation, page faults and a copy into one write
 *  each): room for about three of the largest blocks, so that little of a buffer goes unused. */
export const RESULT_ARENA_BYTES = 1 << 20;

/** Result buffers a writer keeps for reuse once written (more in flight are let go). */
export const RESULT_SPARE_ARENAS = 4;

/** Rows of whole contexts the streaming estimator gathers before it applies the rule to them: large
 *  enough that a rule's setup (a closure, a few arrays) is amortised, small enough to stay in the
 *  caches. A context larger than this (at most V rows: its words are distinct) is taken whole. */
export const ESTIMATE_WINDOW_ROWS = 1 << 16;

/** Bytes per window row the streaming estimator holds besides the ids (4 per id): raw count,
 *  continuation count, Kneser-Ney count, lower probability, probability (8 each) and the kept flag. */
export const ESTIMATE_WINDOW_BYTES_PER_ROW = 41;

/** Rows per batch a job's model source yields: 64 Ki rows (~2 MiB at order 5), as modelSource. */
export const ESTIMATE_SOURCE_BATCH_ROWS = 1 << 16;

// ---- Listing -------------------------------------------------------------------------------

/** N-grams `quern ngrams --by-count` sorts in memory when no --limit is given (≈ 40 B each). */
export const LISTING_SORT_ENTRIES_MAX = 20_000_000;

// ---- Verify --------------------------------------------------------------------------------

/** Problems `quern verify` lists per check; the rest are counted. Twenty name the pattern of a
 *  damage without burying the summary. */
export const VERIFY_PROBLEMS_MAX = 20;

// ---- Assertions on relations between limits -------------------------------------------------
assert(CHUNK_BYTES_TARGET >= READ_BLOCK_BYTES, 'a chunk holds at least one read block');
assert(LINE_BYTES_MAX >= READ_BLOCK_BYTES, 'a line may span read blocks');

// ---- Pack (model file, ARPA) -----------------------------------------------------------------

/** Bytes of one model-file section at most. A reader reads each section into a buffer of its own
 *  (DESIGN.md: never one buffer for the whole file); 2 GiB fits a Buffer on every 64-bit Node and
 *  one read call (fs reads stop at 2 GiB − 1). With float32 values an order may then hold up to
 *  536 M n-grams, with 8-bit codes 2 G. */
export const PACK_SECTION_BYTES_MAX = 2 ** 31;

/** Rows of one order at most: the reader keeps rows and children starts (up to the next order's
 *  rows) in signed 32-bit integers. No bound in practice: an order's values fit one section of
 *  PACK_SECTION_BYTES_MAX, so 2^31 one-byte codes at most anyway. */
export const PACK_ROWS_MAX = 2 ** 31 - 1;

/** Sections of a model file at most: 5 file-wide plus at most 6 per order (47 at order 7); the
 *  rest is room for kinds a later minor version may add. Bounds the section table a reader reads
 *  (64 × 32 bytes) before anything is verified. */
export const PACK_SECTIONS_MAX = 64;

/** Bytes of the description section (JSON of the method's parameters) at most: the largest,
 *  bucketed Jelinek-Mercer weights, is a few KiB; 16 MiB bounds what a reader parses as JSON. */
export const PACK_DESCRIPTION_BYTES_MAX = 16 << 20;

/** Bytes of the corpus fingerprint at most: a hash or a short provenance string. */
export const PACK_FINGERPRINT_BYTES_MAX = 4096;

/** Bytes per read call when a section is loaded, each checksummed right after it is read, while
 *  it is still in the CPU's cache (2 MiB of L2 per core here): 1 MiB pieces. Well under fs's 2 GiB. */
export const PACK_READ_BYTES_MAX = 1 << 20;

/** Sentences (or decoder states) a packed model scores together by default (`stepBatch`,
 *  src/score/batch.ts): each call overlaps the memory accesses of this many lookups. Measured by
 *  `npm run bench:query -- --model … --lanes 64,16,256` on the 1 GB benchmark model (load average
 *  6): 64 lanes ×1.48 the lookups/s of `step`, 16 and 256 lanes ×1.41. 64 states take ~13 KB. */
export const SCORE_LANES = 64;
/** Lanes at most of one batched scoring (each a DecoderState and a slot in a few typed arrays). */
export const SCORE_LANES_MAX = 1 << 16;

/** Bytes of a model file from which `quern score` scores sentences together (`stepBatch`) rather
 *  than one at a time (`step`) when the model's lookups are the JavaScript ones (`scoresInBatches`:
 *  the WebAssembly `step` beats `stepBatch` at every size): `npm run bench:query -- --against
 *  fa2a9de` (load average 4-6) found 64 lanes at ×0.71-0.72 the JavaScript `step`'s lookups/s on the
 *  Brown models (11 and 31 MB files, mostly in the 32 MB L3 cache), ×0.92 on a 35 MB one, ×1.09 on a
 *  95 MB one and ×1.48 on the 3.26 GB one. */
export const SCORE_BATCH_MODEL_BYTES_MIN = 64 << 20;

/** Bytes of the line-aligned chunks `quern score` splits plain inputs into (its default
 *  --chunk-size): the unit of work handed to a worker thread, and of the per-line records held until
 *  their turn to be printed: ~64,000 sentences of the benchmark corpus (its first 28.6 MiB hold
 *  230,469). Not tuned: `bench:score` measured 2 workers with this size only. */
export const SCORE_CHUNK_BYTES = 8 << 20;

/** Tokens `quern score` gathers (whole sentences, `</s>` counted) before it scores them together:
 *  enough to keep SCORE_LANES lanes busy for a thousand calls, a few MB of token strings at most. */
export const SCORE_BATCH_TOKENS = 1 << 16;

/** Bytes the model-file writer gathers before one write call: sections are built in batches of
 *  rows, often smaller; 1 MiB writes keep the calls few. */
export const PACK_WRITE_BUFFER_BYTES = 1 << 20;

/** Bytes per write and per read of a pack's spool (src/pack/spool.ts: a section's content written in
 *  the one pass over its order, read back when its turn comes): 4 MiB, few calls per GB, and one
 *  buffer of each per open spool (at most four at once). A multiple of 8, so every piece holds whole
 *  values. */
export const PACK_SPOOL_BYTES = 4 << 20;

/** Batches of rows a thread reading an order of an estimate for the pack (job-model-source.ts,
 *  `threads`) posts before the pack has taken them: enough to keep it busy while the pack works on
 *  the last ones; each is MERGE_BATCH_RECORDS rows, ~0.3 MB at order 5. */
export const ROWS_THREAD_BATCHES_AHEAD = 4;

/** Rows of an order from which it is read in a thread of its own for the pack (`threads`): a
 *  thread's first batch came 0.55–0.63 s after the pass began, against 0.01–0.12 s on this thread
 *  (the 200 MB job, its 4 MB vocabulary read again by the thread; 3 runs, 2026-12-03), while the
 *  merge passes 2.0–2.8 M rows/s: below a million rows the thread costs more than it saves. */
export const ROWS_THREAD_ROWS_MIN = 1_000_000;

/** Values a quantisation codebook is fitted on at most: larger orders are represented by an
 *  evenly spaced sample of their sorted values (their quantiles), which keeps each Lloyd
 *  iteration to a few milliseconds; the codes are still assigned to every value. */
export const QUANT_FIT_VALUES_MAX = 1 << 22;

/** Lloyd iterations of a codebook fit at most; it stops earlier when no centre moves. Measured on
 *  the log10 probabilities of a Brown order-3 model: the RMS error of 8-bit codes falls from
 *  8.6·10⁻³ after one iteration to 7.03·10⁻³ after 30 and 7.02·10⁻³ after 200; 16-bit codes
 *  settle after 5. */
export const QUANT_ITERATIONS_MAX = 30;

/** Significant digits of the log10 values Quern writes to ARPA files: 7 keeps a float32 value
 *  (about 7.2 digits) and bounds the round-trip error of each value to 5·10⁻⁷ of it. */
export const ARPA_SIGNIFICANT_DIGITS = 7;

/** The log10 written for probability 0 (log10 −∞) in ARPA files, and the value at or below which
 *  a read value is taken as −∞: −99 is common practice for `<s>`'s unigram probability. */
export const ARPA_LOG10_ZERO = -99;

/** Memory for sorting an ARPA file's n-grams into id order (`quern pack --memory`, arpa-rows.ts), by
 *  default: one order's rows at a time, 8n + 28 bytes each (68 at order 5), so 512 MiB sorts
 *  ~7.9 M rows of order 5 per run; a larger order is merged from runs on disk. */
export const ARPA_SORT_BYTES_DEFAULT = 512 << 20;

/** Rows a sort buffer holds at least, whatever the budget (a run of fewer would make merges of
 *  very many runs). ~70 KB at order 5. */
export const ARPA_SORT_ROWS_MIN = 1_024;

/** Rows the ARPA sort buffers while every row so far came in id order (a file Quern wrote) before
 *  it appends them to the order's one run: a few blocks, so that such a file keeps only the start
 *  of the `--memory` buffer in use instead of filling all of it between writes. */
export const ARPA_ASCENDING_FLUSH_ROWS = 8 * 8_192;

/** Rows per block of the ARPA sort's files (arpa-rows.ts): even, so that the blocks' f64 fields
 *  are 8-byte aligned; 8,192 rows are 320 KB at order 5, one read per block in a merge of runs. */
export const ARPA_BLOCK_ROWS = 8_192;

/** The largest ratio of the text deflate restores to its compressed size: 1032:1 (zlib's FAQ, as
 *  remembered; a limit of the format's longest match per code). Bounds the text a gzip file can
 *  hold, for the check of the sizes an ARPA file declares. */
export const DEFLATE_RATIO_MAX = 1032;

/** gzip level of `quern export --out FILE.gz`: 1, the fastest. On the 24 MB corpus's order-5 model
 *  (436 MB of ARPA text; gzip(1) on this machine, 2026-12-03) level 1 took 11.1 s for 155 MB and
 *  level 6, the usual default, 34.5 s for 136 MB: 3.1× the time for 12 % less. zlib compresses in
 *  a thread of its own; with level 1 that export took 22.7 s against 15.9 s to plain text (single
 *  runs beside another job). */
export const ARPA_GZIP_LEVEL = 1;

/** Bytes of ARPA text gathered before one write (`quern export`, arpa-text.ts): 1 MiB, few calls. */
export const ARPA_WRITE_BYTES = 1 << 20;

/** The WebAssembly lookups (src/pack/lookup-wasm.ts) hold the model file's sections in one
 *  WebAssembly memory, whose 32-bit addresses reach 4 GiB (2^16 pages of 64 KiB; Node 20's engine
 *  allows that much): a larger model is read into buffers and answered by the JavaScript lookups. */
export const LOOKUP_WASM_MEMORY_BYTES_MAX = 2 ** 32;

/** The count's WebAssembly memories (src/wasm-module.ts: the spill sort's scratch, a merge's, the
 *  block coder's) are addressed with 32 bits: 4 GiB at most (2^16 pages of 64 KiB). A larger spill
 *  scratch (a worker's budget of many GiB) is an ordinary array, sorted by the JavaScript passes. */
export const WASM_MEMORY_BYTES_MAX = 2 ** 32;

/** Decoder states (`newState`) whose rows live in a model's WebAssembly memory at once, 256 bytes
 *  each (1 MiB for all), for all threads together (each takes 64 at a time): `step` then works on
 *  them where they are. States beyond these (a decoder keeping thousands alive) are copied in and
 *  out of a scratch block per `step`, ~15 % slower (a scratch script on the 24 MB benchmark model,
 *  2026-12-05, in turn in one process: 0.85–0.89× the lookups/s). A state's block is freed when the
 *  state is garbage-collected. */
export const LOOKUP_WASM_STATES_MAX = 4096;

/** Lines of an ARPA file at most: the sort keeps each n-gram's line (for messages) in a u32. */
export const ARPA_LINES_MAX = 0xffff_ffff;

assert(PACK_SECTION_BYTES_MAX <= 2 ** 31, 'a section fits one read call and a Buffer on any 64-bit Node');
assert(PACK_READ_BYTES_MAX < 2 ** 31, 'a read call stays under fs\'s 2 GiB limit');
assert(ARPA_BLOCK_ROWS % 2 === 0, 'ARPA sort blocks hold an even number of rows (8-byte aligned f64 fields)');
