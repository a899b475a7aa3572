/** The lazily loaded command table of src/cli/commands.ts: each name is its module's command. */
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
