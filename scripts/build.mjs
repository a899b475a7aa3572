// `npm run build` (also run by `npm ci` / `npm install` as the `prepare` script): compiles src/ to
// JavaScript in dist/ (tsconfig.build.json: emit only, the type check is `npm run typecheck`),
// copies the sources that are JavaScript or WebAssembly already (worker-boot.mjs, lookup-step.wasm:
// `npm run build:wasm` makes that one), and writes the stamp of the
// sources it compiled (bin/source-stamp.mjs). bin/quern.js runs dist/ while src/ keeps that stamp
// and the sources through tsx otherwise, so a stale dist/ is never run; what the build saves is
// tsx's loading at every start (DEVELOPERS.md, "Start-up").
//
//   node scripts/build.mjs           build dist/ (into a scratch folder first, then renamed)
//   node scripts/build.mjs --check   exit 0 when dist/ is current for src/, 1 when not
import { spawnSync } from 'node:child_process';
import { cpSync, existsSync, readdirSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { builtFrom, sourceStamp, STAMP_FILE } from '../bin/source-stamp.mjs';

const REPO = fileURLToPath(new URL('..', import.meta.url));
const SOURCES = join(REPO, 'src');
const DIST = join(REPO, 'dist');

if (process.argv.includes('--check')) {
  const current = builtFrom(DIST, SOURCES);
  process.stdout.write(current ? 'dist/ is current: quern runs the compiled JavaScript\n' : 'dist/ is missing or stale: quern runs the sources through tsx (npm run build)\n');
  process.exit(current ? 0 : 1);
}

let tsc;
try {
  tsc = createRequire(import.meta.url).resolve('typescript/bin/tsc');
} catch {
  // An install without the dev dependencies: quern runs from the sources, as it always can.
  process.stdout.write('quern build: typescript is not installed, so no dist/: the quern command runs its sources through tsx, and a program that imports quern needs dist/ (npm run build with the dev dependencies)\n');
  process.exit(0);
}

// The stamp is taken before compiling: a source edited meanwhile no longer matches it, so the
// output of a build that raced an edit is never run.
const stamp = sourceStamp(SOURCES);
const scratch = join(REPO, `dist.build-${process.pid}`);
rmSync(scratch, { recursive: true, force: true });
try {
  const result = spawnSync(process.execPath, [tsc, '-p', join(REPO, 'tsconfig.build.json'), '--outDir', scratch], { cwd: REPO, stdio: 'inherit' });
  if (result.status !== 0) throw new Error(`tsc exited with status ${result.status ?? result.signal}`);
  for (const entry of readdirSync(SOURCES, { recursive: true, withFileTypes: true })) {
    if (!entry.isFile() || !(entry.name.endsWith('.mjs') || entry.name.endsWith('.wasm'))) continue;
    const from = join(entry.parentPath ?? entry.path, entry.name);
    const to = join(scratch, from.slice(SOURCES.length));
    cpSync(from, to);
  }
  if (!existsSync(join(scratch, 'cli', 'main.js'))) throw new Error(`tsc wrote no ${join('cli', 'main.js')}`);
  writeFileSync(join(scratch, STAMP_FILE), `${stamp}\n`);
  rmSync(DIST, { recursive: true, force: true });
  renameSync(scratch, DIST);
} catch (error) {
  rmSync(scratch, { recursive: true, force: true });
  process.stderr.write(`quern build failed: ${error.message}\n`);
  process.exit(1);
}
process.stdout.write('quern build: src/ compiled to dist/\n');
