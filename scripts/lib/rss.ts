/**
 * Runs a command under GNU time (`/usr/bin/time -f '%e %M %U %S'`) and returns its wall time, peak
 * resident set size and CPU time, for benchmarks. GNU time writes its report to a temporary file (`-o`), so
 * whatever the command itself prints on stderr is kept apart from the measurement.
 *
 * `%e` is the elapsed wall time in seconds (two decimals) and `%M` the maximum resident set size
 * of the process in KiB, as reported by the kernel (getrusage ru_maxrss) for the command and the
 * descendants it waited for: for a command that forks workers, the figure is the largest single
 * process, not the sum. `%U` and `%S` are the user and system CPU seconds of the command and those
 * descendants (all threads): on a shared machine whose speed moves, CPU time moves less than wall
 * time with the neighbours' load, and shows work a change added or removed.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

export const GNU_TIME_PATH = '/usr/bin/time';

/** Time a timed-out command has to end after SIGINT before its process group is killed. */
export const TIMEOUT_GRACE_MS = 2000;

export interface MeasureOptions {
  cwd?: string;
  /** Environment of the command (default: this process's). */
  env?: NodeJS.ProcessEnv;
  /** 'pipe' collects the output into the result (default); 'inherit' shows it as it comes. */
  stdout?: 'pipe' | 'inherit' | 'ignore';
  stderr?: 'pipe' | 'inherit' | 'ignore';
  /**
   * After this many milliseconds (default: no limit) the command's process group gets SIGINT,
   * which GNU time ignores while it waits, so the command ends and time still reports; if the
   * group is still there `TIMEOUT_GRACE_MS` later, it gets SIGKILL (and then there is no report).
   */
  timeoutMs?: number;
}

export interface Measurement {
  /** Wall time of the command as measured by GNU time (10 ms resolution). */
  elapsedMs: number;
  /** Peak resident set size in bytes (GNU time reports KiB). */
  rssBytesMax: number;
  /** User plus system CPU time of the command and its waited-for descendants (10 ms resolution). */
  cpuMs: number;
  /** Exit status of the command, or null when it was ended by a signal. */
  exitCode: number | null;
  /** Signal number that ended the command, or null. */
  signal: number | null;
  /** True when the command was killed for running past `timeoutMs`. */
  timedOut: boolean;
  /** Collected output ('' unless the stream was 'pipe'). */
  stdout: string;
  stderr: string;
}

/**
 * Runs `command args...` under GNU time and resolves with its measurement. Rejects only when GNU
 * time itself cannot run or reports nothing; a command that fails or is killed resolves, with
 * `exitCode` / `signal` telling how it ended.
 */
export function measureCommand(command: string, args: readonly string[], options: MeasureOptions = {}): Promise<Measurement> {
  if (typeof command !== 'string' || command.length === 0) throw new TypeError('measureCommand: command must be a non-empty string');
  if (options.timeoutMs !== undefined && !(options.timeoutMs > 0)) {
    throw new RangeError(`measureCommand: timeoutMs must be > 0, got ${options.timeoutMs}`);
  }
  const directory = mkdtempSync(join(tmpdir(), 'quern-rss-'));
  const reportPath = join(directory, 'time.txt');
  const stdoutMode = options.stdout ?? 'pipe';
  const stderrMode = options.stderr ?? 'pipe';

  return new Promise<Measurement>((resolvePromise, rejectPromise) => {
    // detached: the command gets its own process group, so a timeout can end it and its children.
    const child = spawn(GNU_TIME_PATH, ['-f', '%e %M %U %S', '-o', reportPath, command, ...args], {
      cwd: options.cwd,
      env: options.env ?? process.env,
      stdio: ['ignore', stdoutMode, stderrMode],
      detached: true,
    });
    const stdoutChunks: Buffer[] = [];
    const stderrChunks: Buffer[] = [];
    child.stdout?.on('data', (chunk: Buffer) => stdoutChunks.push(chunk));
    child.stderr?.on('data', (chunk: Buffer) => stderrChunks.push(chunk));

    let timedOut = false;
    let graceTimer: NodeJS.Timeout | undefined;
    const signalGroup = (signal: NodeJS.Signals): void => {
      if (child.pid === undefined) return;
      try {
        process.kill(-child.pid, signal);
      } catch {
        // The group has already gone.
      }
    };
    const timer =
      options.timeoutMs === undefined
        ? undefined
        : setTimeout(() => {
            timedOut = true;
            signalGroup('SIGINT');
            graceTimer = setTimeout(() => signalGroup('SIGKILL'), TIMEOUT_GRACE_MS);
          }, options.timeoutMs);

    const cleanUp = (): void => {
      if (timer !== undefined) clearTimeout(timer);
      if (graceTimer !== undefined) clearTimeout(graceTimer);
      rmSync(directory, { recursive: true, force: true });
    };

    child.on('error', (error) => {
      cleanUp();
      rejectPromise(new Error(`could not run ${GNU_TIME_PATH}: ${error.message}`, { cause: error }));
    });
    child.on('close', (timeExitCode, timeSignal) => {
      let report = '';
      try {
        report = readFileSync(reportPath, 'utf8');
      } catch {
        // Handled below: no report.
      }
      cleanUp();
      const stdout = Buffer.concat(stdoutChunks).toString('utf8');
      const stderr = Buffer.concat(stderrChunks).toString('utf8');
      const parsed = parseTimeReport(report);
      if (parsed === null) {
        rejectPromise(
          new Error(
            `GNU time gave no report for ${command}${timedOut ? ` (timed out after ${options.timeoutMs} ms)` : ''} ` +
              `(time exit ${timeExitCode ?? timeSignal}): ${JSON.stringify(report)} ${stderr.trim()}`,
          ),
        );
        return;
      }
      resolvePromise({
        elapsedMs: parsed.elapsedMs,
        rssBytesMax: parsed.rssBytesMax,
        cpuMs: parsed.cpuMs,
        exitCode: parsed.signal !== null ? null : (parsed.exitCode ?? timeExitCode),
        signal: parsed.signal,
        timedOut,
        stdout,
        stderr,
      });
    });
  });
}

/**
 * Parses a GNU time report written with `-f '%e %M %U %S'`. GNU time puts "Command exited with non-zero
 * status N" or "Command terminated by signal N" on a line before the format line when that applies.
 * Returns null when there is no format line.
 */
export function parseTimeReport(
  report: string,
): { elapsedMs: number; rssBytesMax: number; cpuMs: number; exitCode: number | null; signal: number | null } | null {
  const lines = report.split('\n').map((line) => line.trim()).filter((line) => line.length > 0);
  const last = lines.at(-1);
  if (last === undefined) return null;
  const match = /^(\d+(?:\.\d+)?) (\d+) (\d+(?:\.\d+)?) (\d+(?:\.\d+)?)$/.exec(last);
  if (match === null) return null;
  let exitCode: number | null = null;
  let signal: number | null = null;
  for (const line of lines.slice(0, -1)) {
    const exited = /^Command exited with non-zero status (\d+)$/.exec(line);
    if (exited) exitCode = Number(exited[1]);
    const signalled = /^Command terminated by signal (\d+)$/.exec(line);
    if (signalled) signal = Number(signalled[1]);
  }
  return {
    elapsedMs: Math.round(Number(match[1]) * 1000),
    rssBytesMax: Number(match[2]) * 1024,
    cpuMs: Math.round((Number(match[3]) + Number(match[4])) * 1000),
    exitCode: signal === null && exitCode === null ? 0 : exitCode,
    signal,
  };
}
