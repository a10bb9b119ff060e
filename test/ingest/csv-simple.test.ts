/**
 * The CSV split without csv-parse (simpleRecords, src/ingest/csv.ts) against csv-parse itself, on
 * seeded random and hostile text: wherever the split answers, its records are csv-parse's, with
 * the options the CSV reader uses. Seed: ROOST_SEED (printed).
 */
import { describe, expect, it } from 'vitest';
import { parse } from 'csv-parse/sync';
import { simpleRecords } from '../../src/ingest/csv.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);
const CASES = 4000;

/** Pieces random texts are made of: cells, delimiters, line ends, quotes, marks, lone surrogates. */
const PIECES = ['a', 'lon', 'lat', '12.5', '-7', '0', ' ', '  ', '\t', ',', ';', '|', '\n', '\n', '\n\n', '\r', '\r\n', '"', '""', '\ufeff', '\ud800', '\udc00', 'é', '😀', 'x,y', '\u2028', '\0', 'id', '#'];
const DELIMITERS = [',', ';', '\t', '|', ',', ',', '"', '\n', '\r', 'a', ' ', '\ufeff'];

function csvParse(text: string, delimiter: string): string[][] | Error {
  try {
    return parse(text, { delimiter, bom: true, relax_column_count: true, skip_empty_lines: true }) as string[][];
  } catch (err) {
    return err as Error;
  }
}

describe('CSV split without csv-parse', () => {
  it('gives csv-parse\'s records wherever it answers, and answers for plain text', () => {
    console.info(`CSV split seed ${SEED} (ROOST_SEED), ${CASES} cases`);
    const r = rng(SEED);
    let answered = 0;
    const differ: string[] = [];
    for (let k = 0; k < CASES; k++) {
      // half the cases from the plain pieces only (what the split reads), half from all of them
      const plain = k % 2 === 0;
      const pool = plain ? PIECES.filter((p) => !/["\r\ufeff\ud800\udc00]/.test(p)) : PIECES;
      let text = '';
      const length = Math.floor(r.next() * 40);
      for (let p = 0; p < length; p++) text += pool[Math.floor(r.next() * pool.length)];
      const delimiter = DELIMITERS[Math.floor(r.next() * DELIMITERS.length)] as string;
      const simple = simpleRecords(text, delimiter);
      if (simple === null) continue;
      answered++;
      const expected = csvParse(text, delimiter);
      if (expected instanceof Error || JSON.stringify(simple) !== JSON.stringify(expected)) differ.push(JSON.stringify({ text, delimiter }));
    }
    expect(differ.slice(0, 5)).toEqual([]);
    // the plain half with a usable delimiter is answered (not a check that passes by answering nothing)
    expect(answered).toBeGreaterThan(CASES / 4);
  });

  it('leaves text with quotes, carriage returns, a byte-order mark or a lone surrogate to csv-parse', () => {
    expect(simpleRecords('a,b\n"1",2\n', ',')).toBeNull();
    expect(simpleRecords('a,b\r\n1,2\r\n', ',')).toBeNull();
    expect(simpleRecords('\ufeffa,b\n1,2\n', ',')).toBeNull();
    expect(simpleRecords('a,b\n\ud800,2\n', ',')).toBeNull();
    expect(simpleRecords('a"b\n', '"')).toBeNull();
    expect(simpleRecords('a,b\n\n1,2\n,\n', ',')).toEqual([['a', 'b'], ['1', '2'], ['', '']]);
  });
});
