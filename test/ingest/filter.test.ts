import { describe, expect, it } from 'vitest';
import { applyFilter, parseBound, parseWhere } from '../../src/ingest/filter.js';
import { readObservations } from '../../src/ingest/read.js';
import { rng } from '../reference/seeded.js';
import { collection, inputError, point } from './helpers.js';

const DAY = 86_400_000;
const T0 = Date.UTC(2024, 4, 1);

/** A seeded set: positions, a species, a count and (for most) an observation time within 10 days. */
function seeded(n: number, seed: number) {
  const r = rng(seed);
  const species = ['heron', 'egret', 'ibis'];
  const items = Array.from({ length: n }, (_, i) => {
    const props: Record<string, unknown> = { species: species[r.int(3)], count: 1 + r.int(4), flagged: r.next() < 0.5 };
    // whole minutes, so some fall exactly on the window bounds
    if (r.next() < 0.9) props.observed_at = new Date(T0 + r.int(10 * 24 * 60) * 60_000).toISOString();
    return point([r.next() * 10, 40 + r.next() * 10], props, `o${i}`);
  });
  return readObservations(collection(items), { weightProperty: 'count' });
}

describe('applyFilter', () => {
  const obs = seeded(400, 3);
  const times = obs.observedAt!;

  it('keeps [since, until): since inclusive, until exclusive, untimed left out and counted', () => {
    const since = '2024-05-03T00:00:00Z';
    const until = '2024-05-06T00:00:00Z';
    const { observations, kept, info } = applyFilter(obs, { since, until });
    const expected: number[] = [];
    let untimed = 0;
    for (let i = 0; i < obs.points.n; i++) {
      const t = times[i]!;
      if (Number.isNaN(t)) untimed++;
      else if (t >= T0 + 2 * DAY && t < T0 + 5 * DAY) expected.push(i);
    }
    expect(Array.from(kept)).toEqual(expected);
    expect(info.left_out_untimed).toBe(untimed);
    expect(untimed).toBeGreaterThan(0);
    expect(info.left_out_by_time).toBe(obs.points.n - untimed - expected.length);
    expect(observations.points.n).toBe(expected.length);
    expected.forEach((i, k) => {
      expect(observations.features[k]).toBe(obs.features[i]);
      expect(observations.points.lon[k]).toBe(obs.points.lon[i]);
      expect(observations.points.lat[k]).toBe(obs.points.lat[i]);
      expect(observations.points.weight![k]).toBe(obs.points.weight![i]);
      expect(observations.observedAt![k]).toBe(times[i]);
    });
  });

  it('includes an observation exactly at since and excludes one exactly at until', () => {
    const o = readObservations(
      collection([point([0, 0], { observed_at: '2024-05-01T00:00:00Z' }), point([0, 0], { observed_at: '2024-05-02T00:00:00Z' }), point([0, 0], { observed_at: '2024-05-01T23:59:59.999Z' })]),
    );
    expect(Array.from(applyFilter(o, { since: '2024-05-01T00:00:00Z', until: '2024-05-02T00:00:00Z' }).kept)).toEqual([0, 2]);
    expect(Array.from(applyFilter(o, { since: '2024-05-02' }).kept)).toEqual([1]);
    expect(Array.from(applyFilter(o, { until: '2024-05-01T02:00:00+02:00' }).kept)).toEqual([]);
  });

  it('applies where conditions as text equality, all of them', () => {
    const { kept, info } = applyFilter(obs, { where: [{ property: 'species', value: 'ibis' }, { property: 'count', value: '2' }] });
    const expected: number[] = [];
    obs.features.forEach((f, i) => {
      if (f.properties!.species === 'ibis' && f.properties!.count === 2) expected.push(i);
    });
    expect(expected.length).toBeGreaterThan(0);
    expect(Array.from(kept)).toEqual(expected);
    expect(info.left_out_by_where).toBe(obs.points.n - expected.length);
    const flagged = applyFilter(obs, { where: [parseWhere('flagged=true')] }).kept;
    expect(Array.from(flagged)).toEqual(obs.features.flatMap((f, i) => (f.properties!.flagged === true ? [i] : [])));
  });

  it('never matches objects, arrays or missing properties; matches null as "null"', () => {
    const o = readObservations(collection([point([0, 0], { v: { a: 1 } }), point([0, 0], { v: [1] }), point([0, 0], {}), point([0, 0], { v: null }), point([0, 0], null)]));
    expect(Array.from(applyFilter(o, { where: [{ property: 'v', value: '[object Object]' }] }).kept)).toEqual([]);
    expect(Array.from(applyFilter(o, { where: [{ property: 'v', value: '1' }] }).kept)).toEqual([]);
    expect(Array.from(applyFilter(o, { where: [{ property: 'v', value: 'null' }] }).kept)).toEqual([3]);
  });

  it('returns the input itself when there is nothing to filter', () => {
    const r = applyFilter(obs, {});
    expect(r.observations).toBe(obs);
    expect(Array.from(r.kept)).toEqual(Array.from({ length: obs.points.n }, (_, i) => i));
    expect(applyFilter(obs, { since: null, until: null, where: [] }).observations).toBe(obs);
  });

  it('leaves everything out when no observation has a time and a window is set', () => {
    const o = readObservations(collection([point([0, 0]), point([1, 1])]));
    const r = applyFilter(o, { since: '2024-01-01' });
    expect(r.observations.points.n).toBe(0);
    expect(r.info.left_out_untimed).toBe(2);
    expect(r.observations.observedAt).toBeNull();
  });

  it('unknown-property for a where property no observation has', () => {
    const err = inputError(() => applyFilter(obs, { where: [{ property: 'Species', value: 'ibis' }] }));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'unknown-property' });
    expect(err.problems[0]!.message).toContain('did you mean "species"');
  });

  it('bad-filter for unreadable or empty windows', () => {
    expect(inputError(() => applyFilter(obs, { since: 'last week' })).problems[0]!.code).toBe('bad-filter');
    const empty = inputError(() => applyFilter(obs, { since: '2024-05-02', until: '2024-05-02' }));
    expect(empty.problems[0]!.message).toContain('is empty');
  });
});

describe('parseWhere and parseBound', () => {
  it('splits at the first = and trims', () => {
    expect(parseWhere('species=heron')).toEqual({ property: 'species', value: 'heron' });
    expect(parseWhere(' note = a=b ')).toEqual({ property: 'note', value: 'a=b' });
    expect(parseWhere('tag=')).toEqual({ property: 'tag', value: '' });
  });

  it('explains a condition without = or without a property', () => {
    const err = inputError(() => parseWhere('species'));
    expect(err.problems[0]).toMatchObject({ code: 'bad-filter' });
    expect(err.problems[0]!.message).toContain('property=value');
    expect(inputError(() => parseWhere('=x')).problems[0]!.code).toBe('bad-filter');
  });

  it('reads dates, minutes without seconds and offset-less times as UTC', () => {
    expect(parseBound('since', '2024-05-01')).toBe(T0);
    expect(parseBound('since', '2024-05-01T06:30')).toBe(T0 + 6.5 * 3_600_000);
    expect(parseBound('since', '2024-05-01 06:30:15.5')).toBe(T0 + 6.5 * 3_600_000 + 15_500);
    expect(parseBound('since', '2024-05-01T06:30:00-01:00')).toBe(T0 + 7.5 * 3_600_000);
  });
});
