/** The whole job in one command, and scoring with the packed model, against the in-memory estimator. */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, symlinkSync, writeFileSync } from 'node:fs';
import * as path from 'node:path';
import { describe, expect, test } from 'vitest';
import { loadCountTables } from '../../src/estimate/from-store.ts';
import { estimate } from '../../src/estimate/estimate.ts';
import { perplexity } from '../../src/score/perplexity.ts';
import { REPO, runQuern, tempDir } from '../support/cli.ts';

describe('quern build and quern score', () => {
  test('the packed model (float32) scores held-out text as the in-memory model does', async () => {
    const dir = tempDir();
    const out = path.join(dir, 'model.qm');
    const build = await runQuern(['build', path.join(REPO, 'sample-data/logbook'), '--lowercase', '--order', '3', '--out', out, '--fallback', '--quiet']);
    expect(build.status).toBe(0);
    expect(build.stdout).toMatch(/^packed .*model\.qm: order 3/);
    const heldout = path.join(REPO, 'sample-data/heldout/harbour-heldout.txt');
    // No --lowercase: build recorded the count's normalisation in the model file, and score uses it.
    const scored = await runQuern(['score', out, heldout, '--json', '--quiet']);
    expect(scored.stderr).toBe('');
    const { total, normalize, normalizeSource } = JSON.parse(scored.stdout);
    expect(normalizeSource).toBe('model');
    expect(normalize).toEqual({ lowercase: true, unicode: 'none', split: 'space' });

    const model = estimate(await loadCountTables(`${out}.job`, 1 << 30), { fallback: true });
    const sentences = readFileSync(heldout, 'utf8').split('\n').map((l) => l.toLowerCase().split(/\s+/).filter(Boolean)).filter((s) => s.length > 0);
    const expected = perplexity(model, sentences);
    expect(total.tokens).toBe(expected.tokens);
    expect(total.oov).toBe(expected.oov);
    // float32 values in the file: agreement to float32 precision over ~20,000 tokens.
    expect(Math.abs(total.log10Prob - expected.log10Prob) / Math.abs(expected.log10Prob)).toBeLessThan(1e-6);
    expect(total.perplexity).toBeCloseTo(expected.perplexity, 4);

    // Per line: one JSON record per sentence, summing to the total.
    const lines = await runQuern(['score', out, heldout, '--lowercase', '--per-line']);
    const records = lines.stdout.trim().split('\n').map((l) => JSON.parse(l));
    expect(records).toHaveLength(expected.sentences);
    expect(records.reduce((s, r) => s + r.tokens, 0)).toBe(expected.tokens);

    // The README's library example runs as written on this model (imports pointed at the source).
    const readme = readFileSync(path.join(REPO, 'README.md'), 'utf8');
    const example = /## Library[\s\S]*?```js\n([\s\S]*?)```/.exec(readme)?.[1];
    expect(example).toBeDefined();
    const script = path.join(dir, 'readme-example.mts');
    writeFileSync(script, example!.replace("from 'quern'", `from ${JSON.stringify(path.join(REPO, 'src/index.ts'))}`).replace("'model.qm'", JSON.stringify(out)));
    const ran = spawnSync(process.execPath, ['--import', 'tsx', script], { cwd: REPO, encoding: 'utf8' });
    expect(ran.stderr).toBe('');
    expect(ran.status).toBe(0);
    const printed = ran.stdout.trim().split('\n');
    expect(printed).toHaveLength(8); // 5 words and </s>, the next words, the three sums
    expect(printed[5]).toMatch(/^<\/s> -\d+\.\d{3} [1-3]$/);
    expect(JSON.parse(printed[6].replaceAll("'", '"'))).toHaveLength(3);

    // And as a plain JavaScript program of a package that depends on quern: `import … from 'quern'`
    // through package.json's exports, the compiled dist/ (current in CI: npm ci built it; on a
    // checkout whose sources changed since the last build, `npm run build` first).
    if (spawnSync(process.execPath, [path.join(REPO, 'scripts/build.mjs'), '--check']).status === 0) {
      const consumer = path.join(dir, 'consumer');
      mkdirSync(path.join(consumer, 'node_modules'), { recursive: true });
      symlinkSync(REPO, path.join(consumer, 'node_modules', 'quern'));
      writeFileSync(path.join(consumer, 'package.json'), '{ "type": "module" }\n');
      writeFileSync(path.join(consumer, 'example.js'), example!.replace("'model.qm'", JSON.stringify(out)));
      const plain = spawnSync(process.execPath, ['example.js'], { cwd: consumer, encoding: 'utf8' });
      expect(plain.stderr).toBe('');
      expect(plain.stdout).toBe(ran.stdout);
      // A TypeScript program of that package type-checks against the declarations the build wrote
      // (strict, NodeNext, no skipLibCheck), and a wrong use of a typed export is an error there.
      symlinkSync(path.join(REPO, 'node_modules', '@types'), path.join(consumer, 'node_modules', '@types'));
      const tsconfig = { compilerOptions: { module: 'NodeNext', moduleResolution: 'NodeNext', target: 'ES2022', strict: true, noEmit: true, types: ['node'] }, files: ['check.ts'] };
      writeFileSync(path.join(consumer, 'tsconfig.json'), JSON.stringify(tsconfig));
      const tsc = (body: string): { status: number | null; stdout: string } => {
        writeFileSync(path.join(consumer, 'check.ts'), `import { openModel, type PackedModel } from 'quern';\nconst model: PackedModel = await openModel('model.qm');\n${body}\n`);
        return spawnSync(process.execPath, [path.join(REPO, 'node_modules/typescript/bin/tsc'), '-p', consumer], { encoding: 'utf8' });
      };
      const typed = tsc('const order: number = model.order;\nconsole.log(order, model.scoreSentence([]).tokens.length);');
      expect(typed.stdout).toBe('');
      expect(typed.status).toBe(0);
      const wrong = tsc('const order: string = model.order;\nconsole.log(order);');
      expect(wrong.stdout).toMatch(/check\.ts\(3,7\): error TS2322/);
      expect(wrong.stdout.trim().split('\n')).toHaveLength(1);
    } else {
      process.stderr.write('build.test.ts: dist/ is not current (npm run build): the README example was not run as plain JavaScript\n');
    }

    // quern pack JOB: the job's estimate packed again: the same bytes as build wrote, or 8-bit codes.
    const again = path.join(dir, 'again.qm');
    const packed = await runQuern(['pack', `${out}.job`, '--out', again]);
    expect(packed.status).toBe(0);
    expect(readFileSync(again).equals(readFileSync(out))).toBe(true);
    const coded = await runQuern(['pack', `${out}.job`, '--out', path.join(dir, 'coded.qm'), '--quant', '8']);
    expect(coded.stdout).toMatch(/8-bit quantised values/);
    const info = await runQuern(['info', path.join(dir, 'coded.qm')]);
    expect(info.stdout).toMatch(/text +normalised as --lowercase/);
  });

  test('quern build takes the count\'s vocabulary cap and chunk size, and checks --text-field as count does', async () => {
    const dir = tempDir();
    const out = path.join(dir, 'capped.qm');
    const built = await runQuern(['build', path.join(REPO, 'sample-data/logbook'), '--order', '2', '--vocab-top', '500', '--chunk-size', '64KiB', '--fallback', '--out', out, '--quiet']);
    expect(built.status).toBe(0);
    const info = JSON.parse((await runQuern(['info', out, '--json'])).stdout);
    expect(info.vocabularyCap).toEqual({ top: 500 });
    expect(info.vocabularySize).toBe(502); // 500 words, </s> and <unk>
    const job = JSON.parse(readFileSync(`${out}.job/job.json`, 'utf8'));
    expect(job.config.chunkBytes).toBe(65536);
    const bad = await runQuern(['build', path.join(REPO, 'sample-data/logbook'), '--text-field', 'a..b', '--out', path.join(dir, 'x.qm'), '--quiet']);
    expect(bad.status).toBe(2);
    expect(bad.stderr).toMatch(/--text-field expects a dotted path/);
  });

  test('the package as npm packs it: its command and its library run from the tarball, compiled', async (context) => {
    // What `files` in package.json ships, checked by installing the tarball by hand (its
    // dependencies from this checkout, so no registry is needed): a missing entry in `files` fails here.
    if (spawnSync(process.execPath, [path.join(REPO, 'scripts/build.mjs'), '--check']).status !== 0) {
      process.stderr.write('build.test.ts: dist/ is not current (npm run build): the tarball was not checked\n');
      context.skip();
    }
    const dir = tempDir();
    const npm = process.platform === 'win32' ? 'npm.cmd' : 'npm';
    const packed = spawnSync(npm, ['pack', '--ignore-scripts', '--json', '--pack-destination', dir], { cwd: REPO, encoding: 'utf8' });
    expect(packed.status).toBe(0);
    const [{ filename, files }] = JSON.parse(packed.stdout) as Array<{ filename: string; files: Array<{ path: string }> }>;
    const shipped = new Set(files.map((f) => f.path));
    for (const needed of ['bin/quern.js', 'bin/source-stamp.mjs', 'dist/index.js', 'dist/index.d.ts', 'dist/.source-stamp', 'dist/count/worker-boot.mjs', 'docs/model-file.md', 'README.md']) {
      expect(shipped.has(needed), needed).toBe(true);
    }
    expect([...shipped].filter((f) => /^(test|bench-out|sample-data|node_modules)\//.test(f))).toEqual([]);
    const installed = path.join(dir, 'consumer', 'node_modules', 'quern');
    mkdirSync(installed, { recursive: true });
    expect(spawnSync('tar', ['-xzf', path.join(dir, filename), '-C', installed, '--strip-components', '1']).status).toBe(0);
    symlinkSync(path.join(REPO, 'node_modules'), path.join(installed, 'node_modules'));
    // The launcher runs dist/ only while the shipped sources carry its stamp.
    const check = spawnSync(process.execPath, [path.join(installed, 'scripts/build.mjs'), '--check'], { cwd: installed, encoding: 'utf8' });
    expect(check.stdout).toMatch(/dist\/ is current/);
    const out = path.join(dir, 'model.qm');
    const cli = path.join(installed, 'bin/quern.js');
    const built = spawnSync(process.execPath, [cli, 'build', path.join(REPO, 'sample-data/logbook'), '--order', '2', '--fallback', '--out', out, '--quiet'], { encoding: 'utf8' });
    expect(built.status).toBe(0);
    const info = spawnSync(process.execPath, [cli, 'info', out, '--json'], { encoding: 'utf8' });
    expect(JSON.parse(info.stdout).order).toBe(2);
    const consumer = path.dirname(path.dirname(installed));
    writeFileSync(path.join(consumer, 'package.json'), '{ "type": "module" }\n');
    writeFileSync(path.join(consumer, 'use.js'), `import { openModel } from 'quern';\nconst model = await openModel(${JSON.stringify(out)});\nconsole.log(model.order, model.scoreSentence(['the']).tokens.length);\n`);
    const used = spawnSync(process.execPath, ['use.js'], { cwd: consumer, encoding: 'utf8' });
    expect(used.stderr).toBe('');
    expect(used.stdout).toBe('2 2\n'); // 'the' and </s>
  });

  test('quern pack of a directory that is not a job, or of a job without an estimate: refused, no file', async () => {
    const dir = tempDir();
    const notJob = await runQuern(['pack', path.join(REPO, 'sample-data'), '--out', path.join(dir, 'x.qm')]);
    expect(notJob.status).toBe(2);
    expect(notJob.stderr).toMatch(/is a directory but not a quern job \(no job\.json\)/);
    const job = path.join(dir, 'job');
    await runQuern(['count', path.join(REPO, 'sample-data/logbook'), '--job', job, '--order', '2', '--quiet']);
    const unestimated = await runQuern(['pack', job, '--out', path.join(dir, 'y.qm')]);
    expect(unestimated.status).toBe(2);
    expect(unestimated.stderr).toMatch(/holds no finished estimate; run quern estimate first/);
    expect(existsSync(path.join(dir, 'x.qm')) || existsSync(path.join(dir, 'y.qm'))).toBe(false);
  });

  test('a stupid-backoff model is refused by score: scores, not probabilities', async () => {
    const dir = tempDir();
    const job = path.join(dir, 'job');
    await runQuern(['count', path.join(REPO, 'sample-data/logbook'), '--job', job, '--order', '2', '--quiet']);
    const est = await runQuern(['estimate', job, '--method', 'stupid-backoff', '--out', path.join(dir, 'sb.qm')]);
    expect(est.status).toBe(0);
    const scored = await runQuern(['score', path.join(dir, 'sb.qm'), path.join(REPO, 'sample-data/heldout')]);
    expect(scored.status).toBe(2);
    expect(scored.stderr).toMatch(/scores, not probabilities/);
  });
});
