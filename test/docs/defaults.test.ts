/**
 * The defaults that openapi.yaml and the README state are the ones the code uses.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { parse } from 'yaml';
import { DEFAULT_MIN_CLUSTER_SHARE, DEFAULT_OPTICS_MAX_EPS_FACTOR, defaultMinClusterSize } from '../../src/run/cluster.js';
import { DEFAULT_SETTINGS, settingsRecord, SETTING_NAMES } from '../../src/run/settings.js';

const spec = parse(readFileSync(new URL('../../openapi.yaml', import.meta.url), 'utf8')) as {
  components: { parameters: Record<string, { name: string; description?: string; schema?: { default?: unknown } }> };
};
const readme = readFileSync(new URL('../../README.md', import.meta.url), 'utf8');
const codeDefaults = settingsRecord(DEFAULT_SETTINGS) as Record<string, unknown>;

/** The README's command-line options table: option → default cell. */
function readmeDefaults(): Map<string, string> {
  const out = new Map<string, string>();
  for (const m of readme.matchAll(/^\| `--([a-z-]+)[^`]*`(?: \/ `[^`]*`)? \| ([^|]+) \|/gm)) out.set(m[1], m[2].trim());
  return out;
}

describe('stated defaults equal the code', () => {
  it('every default in openapi.yaml\'s setting parameters is the code\'s', () => {
    let checked = 0;
    for (const name of SETTING_NAMES) {
      const p = spec.components.parameters[name];
      expect(p, `${name} is a parameter in openapi.yaml`).toBeDefined();
      if (p.schema?.default === undefined) continue;
      expect(p.schema.default, name).toEqual(codeDefaults[name]);
      checked++;
    }
    expect(checked).toBeGreaterThanOrEqual(6);
  });

  it('the defaults that are rules (ξ min_cluster_size, optics_max_eps) are stated as the code applies them', () => {
    const mcs = spec.components.parameters.min_cluster_size.description ?? '';
    expect(mcs).toContain(`the larger of min_points and ${DEFAULT_MIN_CLUSTER_SHARE * 100} % of the observations`);
    for (const [n, minPoints] of [[100, 5], [1000, 5], [1001, 5], [10_000, 5], [10_000, 80]]) {
      expect(defaultMinClusterSize(n, minPoints), `n ${n}, min_points ${minPoints}`).toBe(Math.max(minPoints, Math.ceil((DEFAULT_MIN_CLUSTER_SHARE * n))));
    }
    expect(spec.components.parameters.optics_max_eps.description).toContain(`default ${DEFAULT_OPTICS_MAX_EPS_FACTOR} × eps`);
    const table = readmeDefaults();
    expect(table.get('min-cluster-size')).toBe(`larger of min-points and ${DEFAULT_MIN_CLUSTER_SHARE * 100} % of the observations`);
    expect(table.get('optics-max-eps')).toBe(`${DEFAULT_OPTICS_MAX_EPS_FACTOR} × eps`);
  });

  it('every default in the README\'s command-line table is the code\'s', () => {
    const table = readmeDefaults();
    const flags: Record<string, string> = { 'min-points': 'min_points', method: 'method', hull: 'hull', concavity: 'concavity', 'optics-extraction': 'optics_extraction', xi: 'xi' };
    for (const [flag, name] of Object.entries(flags)) {
      const cell = table.get(flag);
      expect(cell, `--${flag} in the README`).toBeDefined();
      expect(cell!.replace(/`/g, ''), `--${flag}`).toBe(String(codeDefaults[name]));
    }
  });
});
