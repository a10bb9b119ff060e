/**
 * GeoJSON Text Sequences (RFC 8142) and newline-delimited GeoJSON: one Feature per record.
 *
 * - With a record separator (RS, U+001E) anywhere in the text, records are the pieces between
 *   RS characters (each normally ending with a line feed, as RFC 8142 asks); blank pieces are
 *   skipped, and a last record without its line feed is read when it parses (RFC 8142 allows a
 *   reader to keep a truncated-looking record that is still valid JSON).
 * - Without RS, each non-blank line is one record (newline-delimited GeoJSON; CRLF accepted).
 * Records are numbered from 0 in order of appearance, blank ones not counted; messages also give
 * the line of newline-delimited records. A record that is not JSON is reported with the others.
 */
import type { Observations } from './types.js';
import { DEFAULT_TIME_RULE, ProblemList, fail, locate, malformedJsonMessage, type TimeRule } from './checks.js';
import { checkFeatureList } from './geojson.js';

const RS = '\u001e';

/** Reads a GeoJSON text sequence or newline-delimited GeoJSON. Throws InputError; never returns part of the input. */
export function readGeoJsonSeq(text: string, weightProperty: string | null, maxProblems: number, maxFeatures: number, time: TimeRule = DEFAULT_TIME_RULE, storable = false): Observations {
  const useRs = text.indexOf(RS) !== -1;
  const texts: string[] = [];
  const lines: number[] = [];
  if (useRs) {
    for (const piece of text.split(RS)) {
      const t = piece.trim();
      if (t.length > 0) texts.push(t);
    }
  } else {
    let line = 0;
    for (let start = 0; start <= text.length; ) {
      let end = text.indexOf('\n', start);
      if (end === -1) end = text.length;
      line++;
      const t = text.slice(start, end).trim();
      if (t.length > 0) {
        texts.push(t);
        lines.push(line);
      }
      start = end + 1;
    }
  }
  const n = texts.length;
  if (n === 0) fail('empty-input', 'the text sequence has no records; send at least one Point feature');
  if (n > maxFeatures) fail('too-many-features', `the input has ${n} records; at most ${maxFeatures} are accepted in one request — split it`);

  const problems = new ProblemList(maxProblems);
  const items: unknown[] = new Array(n);
  let unparsed: (string | undefined)[] | null = null;
  for (let i = 0; i < n; i++) {
    const t = texts[i] as string;
    try {
      items[i] = JSON.parse(t);
    } catch (err) {
      items[i] = null;
      unparsed ??= new Array<string | undefined>(n);
      unparsed[i] = malformedJsonMessage(t, err, `${locate('record', i, undefined, useRs ? undefined : lines[i])}: `, 'the record');
    }
  }
  const obs = checkFeatureList(items, { weightProperty, noun: 'record', lines: useRs ? null : lines, unparsed, time, storable }, problems);
  problems.throwIfAny();
  return obs;
}
