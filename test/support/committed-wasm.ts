/**
 * The check each WebAssembly module's test makes: the committed .wasm is what the pinned
 * AssemblyScript compiler makes of its source (`npm run build:wasm`), so a source edited without
 * rebuilding, or a module edited by hand, fails.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { createRequire } from 'node:module';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { expect } from 'vitest';

const REPO = fileURLToPath(new URL('../..', import.meta.url));

/** Compiles `source` with `config` (paths relative to the repository) and expects the bytes of `committed`. */
export function expectCommittedWasm(source: string, config: string, committed: string): void {
  const asc = createRequire(import.meta.url).resolve('assemblyscript/bin/asc.js');
  const dir = mkdtempSync(join(tmpdir(), 'quern-asc-'));
  try {
    const out = join(dir, 'module.wasm');
    const result = spawnSync(process.execPath, [asc, source, '--config', config, '-o', out], { cwd: REPO, encoding: 'utf8' });
    expect(result.stderr + result.stdout).toBe('');
    expect(result.status).toBe(0);
    expect(readFileSync(out).equals(readFileSync(join(REPO, committed))), `npm run build:wasm, and commit ${committed}`).toBe(true);
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
