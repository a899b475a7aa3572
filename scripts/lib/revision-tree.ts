/**
 * A git revision's files extracted into a scratch folder, for benchmarks that run another revision's
 * code beside this checkout's (--against): `git archive` of the given paths, untarred, with this
 * checkout's node_modules linked in so that the revision's code runs with the same dependencies.
 * When the paths include `bin` (the launcher) and the revision has scripts/build.mjs, its sources
 * are compiled there too, as `npm ci` compiles this checkout's: both then start the same way.
 */
import { execFileSync, spawnSync } from 'node:child_process';
import { mkdirSync, rmSync, symlinkSync } from 'node:fs';
import { join } from 'node:path';

/** The extracted tree of `revision` (its short hash `hash`). */
export interface RevisionTree {
  hash: string;
  tree: string;
}

/**
 * Extracts `paths` of `revision` of the repository `repo` into `dirFor(hash)` (emptied first).
 * Throws with git's or tar's message when either fails.
 */
export function extractRevision(repo: string, revision: string, paths: readonly string[], dirFor: (hash: string) => string): RevisionTree {
  const hash = execFileSync('git', ['rev-parse', '--short', revision], { cwd: repo, encoding: 'utf8' }).trim();
  const tree = dirFor(hash);
  rmSync(tree, { recursive: true, force: true });
  mkdirSync(tree, { recursive: true });
  const extract = (files: readonly string[]): void => {
    const archive = spawnSync('git', ['archive', '--format=tar', hash, ...files], { cwd: repo, maxBuffer: 1 << 30 });
    if (archive.status !== 0) throw new Error(`git archive ${hash} failed: ${archive.stderr.toString()}`);
    const untar = spawnSync('tar', ['-x', '-C', tree], { input: archive.stdout });
    if (untar.status !== 0) throw new Error(`tar failed: ${untar.stderr.toString()}`);
  };
  extract(paths);
  symlinkSync(join(repo, 'node_modules'), join(tree, 'node_modules'));
  if (paths.includes('bin') && spawnSync('git', ['cat-file', '-e', `${hash}:scripts/build.mjs`], { cwd: repo }).status === 0) {
    extract(['scripts/build.mjs', 'tsconfig.build.json']);
    const built = spawnSync(process.execPath, [join(tree, 'scripts/build.mjs')], { cwd: tree, encoding: 'utf8' });
    if (built.status !== 0) throw new Error(`building ${hash}'s sources failed: ${built.stderr}${built.stdout}`);
  }
  return { hash, tree };
}
