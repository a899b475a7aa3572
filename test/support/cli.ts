/** Runs the quern CLI in a child process, as a user would, and captures its output. */
import { spawn } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { fileURLToPath } from 'node:url';

export const REPO = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '../..');
const BIN = path.join(REPO, 'bin/quern.js');

export interface CliResult {
  status: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
}

/** Runs `quern args…`; with `input`, that is piped into its standard input, which is then closed. */
export function runQuern(args: string[], options: { cwd?: string; env?: NodeJS.ProcessEnv; input?: Uint8Array | string } = {}): Promise<CliResult> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, [BIN, ...args], { cwd: options.cwd ?? REPO, env: { ...process.env, ...options.env } });
    if (options.input !== undefined) {
      // A command that stops reading early (an error) closes the pipe: what was not read is not wanted.
      child.stdin.on('error', (error: NodeJS.ErrnoException) => {
        if (error.code !== 'EPIPE') reject(error);
      });
      child.stdin.end(options.input);
    }
    let stdout = '';
    let stderr = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => { stdout += d; });
    child.stderr.setEncoding('utf8').on('data', (d: string) => { stderr += d; });
    child.on('error', reject);
    child.on('close', (status, signal) => resolve({ status, signal, stdout, stderr }));
  });
}

/** A fresh temporary directory for one test. */
export function tempDir(prefix = 'quern-test-'): string {
  return mkdtempSync(path.join(os.tmpdir(), prefix));
}

/** Parses `ngram<TAB>count` lines into a Map. */
export function parseListing(text: string): Map<string, number> {
  const map = new Map<string, number>();
  for (const line of text.split('\n')) {
    if (!line) continue;
    const tab = line.lastIndexOf('\t');
    map.set(line.slice(0, tab), Number(line.slice(tab + 1)));
  }
  return map;
}
