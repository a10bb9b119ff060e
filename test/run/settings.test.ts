import { describe, expect, it } from 'vitest';
import { DEFAULT_SETTINGS, resolveSettings, SETTING_NAMES, SettingsError, settingsRecord } from '../../src/run/settings.js';

const err = (input: Record<string, unknown>): SettingsError => {
  try {
    resolveSettings(input);
  } catch (e) {
    if (e instanceof SettingsError) return e;
    throw e;
  }
  throw new Error('expected a SettingsError');
};

describe('resolveSettings', () => {
  it('fills defaults and reads strings as numbers', () => {
    const s = resolveSettings({ eps: '250', min_points: '7' });
    expect(s).toMatchObject({ epsMeters: 250, minPoints: 7, method: 'dbscan', hull: 'convex' });
    expect(s.where).toEqual([]);
  });

  it('requires eps, or auto', () => {
    expect(err({}).parameter).toBe('eps');
    expect(resolveSettings({ eps: 'auto' }).epsAuto).toBe(true);
  });

  it.each([
    [{ eps: '-5' }, 'eps', /greater than 0/],
    [{ eps: 'wide' }, 'eps', /must be a number/],
    [{ eps: 100, min_points: 2.5 }, 'min_points', /whole number/],
    [{ eps: 100, min_points: 0 }, 'min_points', /at least 1/],
    [{ eps: 100, method: 'kmeans' }, 'method', /dbscan, optics/],
    [{ eps: 100, hull: 'round' }, 'hull', /convex, concave/],
    [{ eps: 100, xi: 1 }, 'xi', /below 1/],
    [{ eps: 100, since: '2026-05-01T00:00:00' }, 'since', /offset/],
    [{ eps: 100, since: 'yesterday' }, 'since', /RFC 3339/],
    [{ eps: 100, since: '2026-06-01T00:00:00Z', until: '2026-05-01T00:00:00Z' }, 'until', /later than since/],
    [{ eps: 100, where: 'plant' }, 'where', /property=value/],
    [{ eps: 100, epss: 3 }, 'epss', /unknown setting/],
    [{ eps: 500, method: 'optics', optics_max_eps: 200 }, 'eps', /optics_max_eps/],
  ])('%j is refused, naming %s', (input, parameter, message) => {
    const e = err(input);
    expect(e.parameter).toBe(parameter);
    expect(e.message).toMatch(message);
  });

  it('accepts dates, offsets and repeated conditions', () => {
    const s = resolveSettings({ eps: 10, since: '2026-05-01', until: '2026-05-02T00:00:00+02:00', where: ['plant=balsam', 'observer=v=1'] });
    expect(s.since).toBe('2026-05-01');
    expect(s.where).toEqual([
      { property: 'plant', value: 'balsam' },
      { property: 'observer', value: 'v=1' },
    ]);
  });

  it('completes a base (a dataset\'s own settings) without changing it', () => {
    const base = resolveSettings({ eps: 300, min_points: 9, where: 'plant=balsam' });
    const s = resolveSettings({ min_points: 4 }, base);
    expect(s).toMatchObject({ epsMeters: 300, minPoints: 4 });
    expect(base.minPoints).toBe(9);
    expect(s.where).not.toBe(base.where);
  });

  it('round-trips through its record form, which names every setting', () => {
    const s = resolveSettings({ eps: 120, min_points: 6, method: 'optics', xi: 0.1, count_by: 'plant' });
    const rec = settingsRecord(s);
    expect(Object.keys(rec).sort()).toEqual([...SETTING_NAMES].sort());
    expect(resolveSettings(rec as Record<string, unknown>)).toEqual(s);
    expect(DEFAULT_SETTINGS.minPoints).toBe(5);
  });

  it('takes a time column and a time format, refusing a format it cannot read', () => {
    const s = resolveSettings({ eps: 10, time_column: 'Datum', time_format: 'DD.MM.YYYY' });
    expect(s.timeColumn).toBe('Datum');
    expect(s.timeFormat).toBe('DD.MM.YYYY');
    expect(() => resolveSettings({ eps: 10, time_format: 'dd.mm.yyyy' })).toThrow(/^time_format: "dd\.mm\.yyyy" has an unknown letter "d"/);
  });
});
