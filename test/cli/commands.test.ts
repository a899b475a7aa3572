/** The lazily loaded command table of src/cli/commands.ts (each name is its module's command), and
 *  how `quern` (src/cli/main.ts) reads the arguments after `--`. */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import * as os from 'node:os';
import * as path from 'node:path';
import { describe, expect, it } from 'vitest';
import { COMMAND_LOADERS } from '../../src/cli/commands.ts';
import { runQuern } from '../support/cli.ts';

describe('command table', () => {
  for (const [name, load] of Object.entries(COMMAND_LOADERS)) {
    it(`${name} loads the module whose command is ${name}`, async () => {
      const command = await load();
      expect(String(command.command).split(' ')[0]).toBe(name);
      expect(typeof command.handler).toBe('function');
    });
  }

  it('quern --help lists every command; a typo gets a suggestion and exit status 2', async () => {
    const help = await runQuern(['--help']);
    expect(help.status).toBe(0);
    for (const name of Object.keys(COMMAND_LOADERS)) expect(help.stdout).toMatch(new RegExp(`quern ${name}\\b`));
    const typo = await runQuern(['reprot', 'x']);
    expect(typo.status).toBe(2);
    expect(typo.stderr).toMatch(/report/);
  });
});

describe('arguments', () => {
  it('after --, every argument is an operand: a file named -x.txt is counted; --job there is a file name too', async () => {
    // The usual convention of command-line tools (common practice): `--` ends the options.
    const dir = mkdtempSync(path.join(os.tmpdir(), 'quern-dashes-'));
    try {
      writeFileSync(path.join(dir, '-x.txt'), 'a b c\nb c d\n');
      const counted = await runQuern(['count', '--job', 'j', '--order', '2', '--quiet', '--json', '--', '-x.txt'], { cwd: dir });
      expect(counted.stderr).toBe('');
      expect(counted.status).toBe(0);
      expect(JSON.parse(counted.stdout)).toMatchObject({ inputs: 1, tokens: 6, distinct: [5, 7] });
      const listed = await runQuern(['ngrams', 'j', '--order', '2', '--by-count', '--limit', '1'], { cwd: dir });
      expect(listed.stdout).toBe('b c\t2\n');
      const misplaced = await runQuern(['count', '--', '-x.txt', '--job', 'k', '--order', '2'], { cwd: dir });
      expect(misplaced.status).toBe(2);
      expect(misplaced.stderr).toMatch(/Missing required argument: job/);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
