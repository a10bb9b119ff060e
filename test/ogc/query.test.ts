import { describe, expect, it } from 'vitest';
import { HttpProblem } from '../../src/http/errors.js';
import { bboxesIntersect, MAX_LIMIT, parseBbox, parseDatetime, parseItemsQuery, parseLimit, timeIntersects, type Bbox } from '../../src/ogc/query.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_TEST_SEED ?? 20261203);

function refused(f: () => unknown, parameter: string): void {
  try {
    f();
  } catch (err) {
    expect(err).toBeInstanceOf(HttpProblem);
    expect((err as HttpProblem).status).toBe(400);
    expect((err as HttpProblem).extensions).toMatchObject({ parameter });
    return;
  }
  throw new Error(`expected ${parameter} to be refused`);
}

/** Whether a longitude lies in a box's span (west > east crosses ±180), by definition. */
function lonIn(lon: number, w: number, e: number): boolean {
  return w <= e ? lon >= w && lon <= e : lon >= w || lon <= e;
}

describe('OGC items query', () => {
  it('reads bbox, with boxes across the antimeridian, and refuses malformed ones', () => {
    // source: OGC 17-069r4 §7.15.4 (lower-left, upper-right; "the value of the lower corner
    // longitude can be larger than the upper corner" across the antimeridian), RFC 7946 §5.2
    expect(parseBbox('160.6,-55.95,-170,-25.89')).toEqual([160.6, -55.95, -170, -25.89]);
    expect(parseBbox('1,2,0,3,4,10')).toEqual([1, 2, 3, 4]);
    for (const bad of ['1,2,3', '1,2,3,x', '0,10,5,0', '-181,0,0,1', '0,-91,1,1', '1,,2,3']) refused(() => parseBbox(bad), 'bbox');
  });

  it('decides box intersection as a brute-force walk over both boxes does', () => {
    // the reference: a box meets another when some sampled position lies in both (0.5° grid,
    // edges included), with both spans read by definition
    const r = rng(SEED);
    console.log(`bbox intersection: seed ${SEED} (set ROOST_TEST_SEED to vary)`);
    const grid = (x: number): number => Math.round(x * 2) / 2;
    const box = (): Bbox => {
      const w = grid(-180 + r.next() * 360);
      const e = grid(-180 + r.next() * 360);
      const s = grid(-90 + r.next() * 170);
      const n = grid(s + r.next() * (90 - s));
      return [w, s, e, n];
    };
    for (let k = 0; k < 400; k++) {
      const a = box();
      const b = box();
      let meet = false;
      for (let lat = -90; lat <= 90 && !meet; lat += 0.5) {
        if (lat < a[1] || lat > a[3] || lat < b[1] || lat > b[3]) continue;
        for (let lon = -180; lon <= 180; lon += 0.5) {
          if (lonIn(lon, a[0], a[2]) && lonIn(lon, b[0], b[2])) {
            meet = true;
            break;
          }
        }
      }
      expect(bboxesIntersect(a, b), JSON.stringify([a, b])).toBe(meet);
    }
    // a box reaching +180 meets one starting at −180: the same meridian
    expect(bboxesIntersect([170, 0, 180, 10], [-180, 0, -170, 10])).toBe(true);
    expect(bboxesIntersect([170, 0, -170, 10], [-175, 5, -172, 6])).toBe(true);
    expect(bboxesIntersect([170, 0, -170, 10], [0, 0, 10, 10])).toBe(false);
  });

  it('reads datetime instants and intervals with open ends, both ends inclusive', () => {
    // source: OGC 17-069r4 §7.15.5, its examples (recalled from memory): an instant, a bounded
    // interval, and half-bounded ones with ".."
    const t = (s: string): number => Date.parse(s);
    expect(parseDatetime('2018-02-12T23:20:50Z')).toEqual({ from: t('2018-02-12T23:20:50Z'), to: t('2018-02-12T23:20:50Z') + 1 });
    expect(parseDatetime('2018-02-12T00:00:00Z/2018-03-18T12:31:12Z')).toEqual({ from: t('2018-02-12T00:00:00Z'), to: t('2018-03-18T12:31:12Z') + 1 });
    expect(parseDatetime('2018-02-12T00:00:00Z/..')).toEqual({ from: t('2018-02-12T00:00:00Z') });
    expect(parseDatetime('../2018-03-18T12:31:12Z')).toEqual({ to: t('2018-03-18T12:31:12Z') + 1 });
    expect(parseDatetime('/2018-03-18T12:31:12Z')).toEqual({ to: t('2018-03-18T12:31:12Z') + 1 });
    // a date is the whole day
    expect(parseDatetime('2018-02-12')).toEqual({ from: t('2018-02-12T00:00:00Z'), to: t('2018-02-13T00:00:00Z') });
    for (const bad of ['yesterday', '../..', '2018-03-18T00:00:00Z/2018-02-12T00:00:00Z', '2018-02-12T25:00:00Z', 'a/b/c']) refused(() => parseDatetime(bad), 'datetime');
    expect(timeIntersects(t('2018-01-01T00:00:00Z'), t('2018-02-12T00:00:00Z'), parseDatetime('2018-02-12T00:00:00Z/..'))).toBe(true);
    expect(timeIntersects(t('2018-01-01T00:00:00Z'), t('2018-02-11T23:59:59Z'), parseDatetime('2018-02-12T00:00:00Z/..'))).toBe(false);
    expect(timeIntersects(NaN, NaN, {})).toBe(false);
  });

  it('reads limit (default 100, larger than the maximum answered with the maximum) and refuses unknown parameters', () => {
    expect(parseLimit(undefined)).toBe(100);
    expect(parseLimit('7')).toBe(7);
    expect(parseLimit('1000000')).toBe(MAX_LIMIT);
    for (const bad of ['0', '-1', '1.5', 'ten']) refused(() => parseLimit(bad), 'limit');
    refused(() => parseItemsQuery({ limit: '5', colour: 'red' }), 'colour');
    refused(() => parseItemsQuery({ crs: 'http://www.opengis.net/def/crs/EPSG/0/3857' }), 'crs');
    refused(() => parseItemsQuery({ 'bbox-crs': 'EPSG:4326' }), 'bbox-crs');
    refused(() => parseItemsQuery({ limit: ['5', '6'] }), 'limit');
    refused(() => parseItemsQuery({ f: 'xml' }), 'f');
    expect(parseItemsQuery({ crs: 'http://www.opengis.net/def/crs/OGC/1.3/CRS84', bbox: '0,0,1,1', f: 'html' })).toMatchObject({ bbox: [0, 0, 1, 1], format: 'html', limit: 100 });
  });
});
