import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { buildProgram } from '../../src/cli/main.js';
import { OPTIONS } from '../../src/http/config.js';
import { SETTING_NAMES } from '../../src/run/settings.js';

const readme = readFileSync(new URL('../../README.md', import.meta.url), 'utf8');

describe('README', () => {
  it('opens with the job, then the run command and the test command', () => {
    const blocks = [...readme.matchAll(/```sh\n([^`]+)```/g)].map((m) => m[1].trim());
    expect(blocks[0]).toBe('npm ci && npm start -- --demo');
    expect(blocks[1]).toBe('npm ci && npm test');
    expect(readme.indexOf('```sh')).toBeGreaterThan(readme.indexOf('Roost finds where point observations gather'));
  });

  it('documents every service option with its flag and environment variable', () => {
    for (const o of OPTIONS) {
      expect(readme, o.flag).toContain(`\`${o.flag}\``);
      expect(readme, o.env).toContain(`\`${o.env}\``);
    }
  });

  it('documents every option of roost cluster and every setting name', () => {
    const program = buildProgram(() => undefined);
    const cluster = program.commands.find((c) => c.name() === 'cluster')!;
    for (const o of cluster.options) expect(readme, o.long).toContain(`\`${o.long}`);
    for (const name of SETTING_NAMES) expect(readme, name).toContain(`\`${name}\``);
  });

  it('carries the cautions', () => {
    expect(readme).toMatch(/mirror where observers went/);
    expect(readme).toMatch(/Exact locations can cause harm/);
    expect(readme).toMatch(/pattern, not a cause/);
    expect(readme).toMatch(/local rules and licensed practice/);
  });
});
