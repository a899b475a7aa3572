/**
 * The environment Node gets when `bin/quern.js` runs as a program: its first line after the
 * shebang is a shell command that adds glibc's transparent-huge-page tunable
 * (`glibc.malloc.hugetlb=1`) to GLIBC_TUNABLES, unless QUERN_HUGE_PAGES=0 or the tunable is set
 * already. Benchmarks that start Node themselves (`node --import tsx script.ts`) take the same
 * environment from here, computed by running that very shell line, so the rule is written once.
 */
import { execFileSync, spawnSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';

const REPO_ROOT = fileURLToPath(new URL('../..', import.meta.url));
const BIN = join(REPO_ROOT, 'bin/quern.js');
const PREFIX = "':' //;";
const SUFFIX = 'exec node "$0" "$@"';

/** The shell commands of bin/quern.js's second line that set the environment (without its exec). */
function binShellLine(): string {
  const line = readFileSync(BIN, 'utf8').split('\n')[1];
  if (!(line.startsWith(PREFIX) && line.trimEnd().endsWith(SUFFIX))) throw new Error(`${BIN}: line 2 is not the shell line this script expects: ${line}`);
  return line.slice(PREFIX.length, line.trimEnd().length - SUFFIX.length);
}

/** `base` as bin/quern.js hands it to Node (huge pages on unless `base` turns them off). */
export function quernProgramEnv(base: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  const tunables = execFileSync('sh', ['-c', `${binShellLine()} printf '%s' "\${GLIBC_TUNABLES:-}"`], { env: base, encoding: 'utf8' });
  const env = { ...base };
  if (tunables === '') delete env.GLIBC_TUNABLES;
  else env.GLIBC_TUNABLES = tunables;
  return env;
}

/**
 * `base` with huge pages as the program would have them (`on`), or without them (`off`: any
 * glibc.malloc.hugetlb setting of `base` removed too), for benchmarks that compare the two.
 */
export function hugePagesEnv(mode: 'on' | 'off', base: NodeJS.ProcessEnv = process.env): NodeJS.ProcessEnv {
  if (mode === 'on') return quernProgramEnv({ ...base, QUERN_HUGE_PAGES: '1' });
  const env: NodeJS.ProcessEnv = { ...base, QUERN_HUGE_PAGES: '0' };
  const tunables = (base.GLIBC_TUNABLES ?? '').split(':').filter((t) => t !== '' && !t.startsWith('glibc.malloc.hugetlb='));
  if (tunables.length === 0) delete env.GLIBC_TUNABLES;
  else env.GLIBC_TUNABLES = tunables.join(':');
  return env;
}

/**
 * Makes sure `bin/quern.js` of this checkout runs the compiled `dist/` (scripts/build.mjs), as it
 * does after `npm ci`: a benchmark that starts the CLI after the sources changed would otherwise
 * measure them through tsx, which starts every process and worker thread more slowly (DEVELOPERS.md,
 * "Start-up"), beside a revision (`--against`) that extractRevision compiled. Builds when needed
 * and says so on stderr; throws when the build fails.
 */
export function ensureCompiled(): void {
  const script = join(REPO_ROOT, 'scripts/build.mjs');
  if (spawnSync(process.execPath, [script, '--check'], { stdio: 'ignore' }).status === 0) return;
  process.stderr.write('dist/ is not current for src/: building it (npm run build), so that quern runs compiled as after npm ci\n');
  const built = spawnSync(process.execPath, [script], { stdio: ['ignore', 'ignore', 'inherit'] });
  if (built.status !== 0) throw new Error(`npm run build failed (status ${built.status})`);
}
