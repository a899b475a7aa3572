/**
 * The launcher and the build: bin/quern.js runs the JavaScript compiled into dist/ only while src/
 * is what it was compiled from, and the sources through tsx otherwise (bin/source-stamp.mjs,
 * scripts/build.mjs). Tested on a small project laid out like the repository (the real launcher,
 * stamp module, build script and tsconfig files copied in, node_modules linked), so that editing
 * its sources does not touch the repository's own dist/.
 */
import { spawnSync } from 'node:child_process';
import { cpSync, existsSync, mkdirSync, readFileSync, rmSync, symlinkSync, utimesSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { REPO, tempDir } from '../support/cli.ts';

let project: string;

function write(relative: string, text: string): void {
  const file = path.join(project, relative);
  mkdirSync(path.dirname(file), { recursive: true });
  writeFileSync(file, text);
}

/** `node bin/quern.js` in the project: which code ran ('compiled' or 'source') and the word it printed. */
function launch(env: NodeJS.ProcessEnv = {}): string {
  const result = spawnSync(process.execPath, [path.join(project, 'bin/quern.js')], { env: { ...process.env, QUERN_FROM_SOURCE: '', ...env }, encoding: 'utf8' });
  expect(result.stderr).toBe('');
  expect(result.status).toBe(0);
  return result.stdout.trim();
}

function build(...args: string[]): { status: number | null; stdout: string } {
  const result = spawnSync(process.execPath, [path.join(project, 'scripts/build.mjs'), ...args], { encoding: 'utf8' });
  return { status: result.status, stdout: result.stdout };
}

beforeAll(() => {
  project = tempDir('quern-launcher-');
  for (const file of ['bin/quern.js', 'bin/source-stamp.mjs', 'scripts/build.mjs', 'tsconfig.json', 'tsconfig.build.json']) {
    mkdirSync(path.dirname(path.join(project, file)), { recursive: true });
    cpSync(path.join(REPO, file), path.join(project, file));
  }
  symlinkSync(path.join(REPO, 'node_modules'), path.join(project, 'node_modules'));
  write('package.json', '{ "type": "module" }\n');
  // main.ts imports a sibling by its .ts name, as the real sources do: the build must rewrite it.
  write('src/cli/main.ts', "import { word } from './word.ts';\nconst from: string = import.meta.url.endsWith('.ts') ? 'source' : 'compiled';\nconsole.log(`${from} ${word}`);\n");
  write('src/cli/word.ts', "export const word: string = 'harbour';\n");
  write('src/count/worker-boot.mjs', '// copied as it is\n');
}, 60_000);

afterAll(() => rmSync(project, { recursive: true, force: true }));

describe('bin/quern.js and scripts/build.mjs', () => {
  it('runs the sources before any build', () => {
    expect(existsSync(path.join(project, 'dist'))).toBe(false);
    expect(launch()).toBe('source harbour');
    expect(build('--check').status).toBe(1);
  });

  it('runs the compiled JavaScript once built, and the sources when asked', { timeout: 60_000 }, () => {
    expect(build().status).toBe(0);
    expect(existsSync(path.join(project, 'dist/cli/word.js'))).toBe(true);
    expect(readFileSync(path.join(project, 'dist/count/worker-boot.mjs'), 'utf8')).toBe('// copied as it is\n');
    expect(readFileSync(path.join(project, 'dist/cli/main.js'), 'utf8')).toContain('"./word.js"');
    expect(build('--check').status).toBe(0);
    expect(launch()).toBe('compiled harbour');
    expect(launch({ QUERN_FROM_SOURCE: '1' })).toBe('source harbour');
  });

  it('never runs a stale build: an edited, added or removed source sends it to the sources, a touched one does not', { timeout: 60_000 }, () => {
    write('src/cli/word.ts', "export const word: string = 'lighthouse';\n");
    expect(launch()).toBe('source lighthouse');
    expect(build('--check').status).toBe(1);

    expect(build().status).toBe(0);
    expect(launch()).toBe('compiled lighthouse');
    // The same length, other bytes.
    write('src/cli/word.ts', "export const word: string = 'LIGHTHOUSE';\n");
    expect(launch()).toBe('source LIGHTHOUSE');
    write('src/cli/word.ts', "export const word: string = 'lighthouse';\n");
    expect(launch()).toBe('compiled lighthouse');
    // Touched, not changed (a checkout or an unpacked package with the same sources): still current.
    const later = new Date(Date.now() + 5_000);
    utimesSync(path.join(project, 'src/cli/word.ts'), later, later);
    expect(launch()).toBe('compiled lighthouse');

    expect(build().status).toBe(0);
    write('src/cli/extra.ts', 'export {};\n');
    expect(launch()).toBe('source lighthouse');
    rmSync(path.join(project, 'src/cli/extra.ts'));
    expect(launch()).toBe('compiled lighthouse');
  });

  it('runs the sources when the stamp is missing', { timeout: 60_000 }, () => {
    expect(build().status).toBe(0);
    rmSync(path.join(project, 'dist/.source-stamp'));
    expect(launch()).toBe('source lighthouse');
  });

  it('fails, leaving the last dist/ in place, when the sources do not compile', { timeout: 60_000 }, () => {
    expect(build().status).toBe(0);
    write('src/cli/word.ts', 'export const word: string = ;\n');
    const failed = build();
    expect(failed.status).toBe(1);
    expect(existsSync(path.join(project, 'dist/cli/main.js'))).toBe(true);
    expect(spawnSync('ls', [project]).stdout.toString()).not.toMatch(/dist\.build-/);
  });
});
