/**
 * Posted observations into store records: CSV ids under a dataset's id property, and the same
 * properties for a CSV whether it is posted to the service or given to the command line.
 */
import { describe, expect, it } from 'vitest';
import { readObservations } from '../../src/ingest/read.js';
import { readRecords } from '../../src/ingest/records.js';
import { InputError } from '../../src/ingest/types.js';

const csv = 'ID,lon,lat,birds,note\nh-1,8.5,47.2,3,007\nh-2,8.6,47.3,12,\n';

describe('CSV records', () => {
  it('take their ids from the column the dataset names, even when it is called ID', () => {
    const batch = readRecords(csv, { format: 'csv', idProperty: 'ID', weightProperty: null, partial: false });
    expect(batch.records.map((r) => r.id)).toEqual(['h-1', 'h-2']);
    // the id stays a property, where the id rule finds it again when the same file is posted twice
    expect(JSON.parse(batch.records[0]!.feature).properties.ID).toBe('h-1');
  });

  it('take a column named in the id property even when another is called id', () => {
    const both = 'id,ref,lon,lat\n1,nest-a,8.5,47.2\n2,nest-b,8.6,47.3\n';
    const batch = readRecords(both, { format: 'csv', idProperty: 'ref', weightProperty: null, partial: false });
    expect(batch.records.map((r) => r.id)).toEqual(['nest-a', 'nest-b']);
    expect(JSON.parse(batch.records[1]!.feature).properties).toEqual({ id: '2', ref: 'nest-b' });
  });

  it('without an id property, still use an id column as the GeoJSON id', () => {
    const batch = readRecords(csv, { format: 'csv', idProperty: null, weightProperty: null, partial: false });
    expect(batch.records.map((r) => r.id)).toEqual(['h-1', 'h-2']);
  });

  it('name a missing id by row when the id property is empty', () => {
    const gap = 'ref,lon,lat\n,8.5,47.2\n';
    expect(() => readRecords(gap, { format: 'csv', idProperty: 'ref', weightProperty: null, partial: false })).toThrow(InputError);
  });

  it('keep the same properties as the command line reads: the weight a number, other cells text as written', () => {
    const service = readRecords(csv, { format: 'csv', idProperty: 'ID', weightProperty: 'birds', partial: false });
    const cli = readObservations(csv, { format: 'csv', weightProperty: 'birds', idProperty: 'ID' });
    for (let i = 0; i < 2; i++) expect(JSON.parse(service.records[i]!.feature).properties).toEqual(cli.features[i]!.properties);
    expect(JSON.parse(service.records[0]!.feature).properties).toEqual({ ID: 'h-1', birds: 3, note: '007' });
    expect(service.records[1]!.weight).toBe(12);
  });
});
