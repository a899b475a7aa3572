/**
 * Progress of long work. On a terminal: a bar with bytes read of total, tokens/s, elapsed time, ETA
 * and memory in use (cli-progress). Not on a terminal: one summary line per phase. `--quiet`: nothing.
 */
import cliProgress from 'cli-progress';
import bytes from 'bytes-iec';
import type { ProgressSink } from '../count/stage.ts';

function formatBytes(n: number): string {
  return bytes.format(n, { mode: 'binary', decimalPlaces: 1 }) ?? `${n} B`;
}

function formatRate(n: number): string {
  if (n >= 1e6) return `${(n / 1e6).toFixed(2)}M`;
  if (n >= 1e3) return `${(n / 1e3).toFixed(1)}k`;
  return `${Math.round(n)}`;
}

export function makeProgress(mode: 'auto' | 'quiet', stream: NodeJS.WriteStream = process.stderr): ProgressSink {
  if (mode === 'quiet') return { start() {}, update() {}, stop() {} };
  if (!stream.isTTY) {
    let label = '';
    let total = 0;
    let bytesDone = 0;
    let tokens = 0;
    let started = 0;
    return {
      start(l, t) { label = l; total = t; bytesDone = 0; tokens = 0; started = Date.now(); },
      update(b, k) { bytesDone += b; tokens += k; },
      stop() {
        const seconds = (Date.now() - started) / 1000;
        stream.write(`quern: ${label}: ${formatBytes(bytesDone)} of ${formatBytes(total)}, ${formatRate(tokens)} tokens in ${seconds.toFixed(1)} s (${formatRate(tokens / Math.max(seconds, 1e-3))} tokens/s)\n`);
      },
    };
  }
  let bar: cliProgress.SingleBar | undefined;
  let bytesDone = 0;
  let tokens = 0;
  let started = 0;
  return {
    start(label, total) {
      bytesDone = 0; tokens = 0; started = Date.now();
      bar = new cliProgress.SingleBar({
        stream,
        format: `${label} [{bar}] {percentage}% | {done} of {all} | {rate} tokens/s | {duration_formatted} elapsed, ETA {eta_formatted} | {rss}`,
        hideCursor: true,
        etaBuffer: 50,
        fps: 5,
      }, cliProgress.Presets.shades_classic);
      bar.start(Math.max(total, 1), 0, { done: formatBytes(0), all: formatBytes(total), rate: '0', rss: formatBytes(process.memoryUsage.rss()) });
    },
    update(b, k) {
      bytesDone += b; tokens += k;
      const seconds = Math.max((Date.now() - started) / 1000, 1e-3);
      bar?.update(bytesDone, { done: formatBytes(bytesDone), rate: formatRate(tokens / seconds), rss: `${formatBytes(process.memoryUsage.rss())} in use` });
    },
    stop() { bar?.stop(); bar = undefined; },
  };
}
