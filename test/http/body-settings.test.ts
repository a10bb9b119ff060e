/**
 * The settings member of a body found without parsing the body (src/http/body-settings.ts) is
 * always what `JSON.parse` of the whole body finds: the reference here is `JSON.parse` itself
 * (source: ECMA-262, JSON.parse; RFC 8259 for the grammar both follow), on hand-written cases and
 * on seeded random documents, whole and broken (cut, a byte put in, taken out or changed).
 *
 * Seeded: ROOST_SEED changes the documents (the seed in use is printed); ROOST_CASES their number.
 */
import { describe, expect, it } from 'vitest';
import { bodySettingsMember, type BodySettings } from '../../src/http/body-settings.js';
import { rng } from '../reference/seeded.js';

const SEED = Number(process.env.ROOST_SEED ?? 16);
const CASES = Number(process.env.ROOST_CASES ?? 4000);

/** What JSON.parse of the whole body says about its top-level settings member. */
function byParsing(bytes: Buffer): BodySettings {
  let doc: unknown;
  try {
    doc = JSON.parse(bytes.toString('utf8'));
  } catch {
    return { kind: 'not-json' };
  }
  if (doc === null || typeof doc !== 'object' || Array.isArray(doc) || !('settings' in doc)) return { kind: 'absent' };
  return { kind: 'present', value: (doc as { settings: unknown }).settings };
}

/** Checks one body against JSON.parse; returns the kind of answer. */
const check = (text: string | Buffer): BodySettings['kind'] => {
  const bytes = Buffer.isBuffer(text) ? text : Buffer.from(text);
  const found = bodySettingsMember(bytes);
  expect(found, bytes.toString('utf8')).toEqual(byParsing(bytes));
  return found.kind;
};

describe('the settings member of a body, read without parsing the body', () => {
  it('finds the member where JSON.parse does, and only there', () => {
    const cases: Array<[string, BodySettings]> = [
      ['{"type":"FeatureCollection","settings":{"eps":120},"features":[]}', { kind: 'present', value: { eps: 120 } }],
      ['{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"settings":{"eps":5}},"geometry":null}]}', { kind: 'absent' }],
      ['{"note":"settings","features":[]}', { kind: 'absent' }],
      // the last of two members counts; a name with escapes is read as JSON.parse reads it
      ['{"settings":{"eps":1},"settings":{"eps":2}}', { kind: 'present', value: { eps: 2 } }],
      ['{"settin\\u0067s":{"min_points":3}}', { kind: 'present', value: { min_points: 3 } }],
      ['{"settings\\u0000":{"eps":1}}', { kind: 'absent' }],
      [' \t\r\n{ "settings" : [1, 2.5e-3, -0, true, false, null, "\\"\\\\\\/\\b\\f\\n\\r\\t\\u00e9"] } \n', { kind: 'present', value: [1, 2.5e-3, -0, true, false, null, '"\\/\b\f\n\r\té'] }],
      ['{"settings":null}', { kind: 'present', value: null }],
      ['["settings"]', { kind: 'absent' }],
      ['"settings"', { kind: 'absent' }],
      ['{}', { kind: 'absent' }],
      // not JSON: a byte-order mark, trailing commas, leading zeros, bare words, two texts, nothing
      ['\ufeff{"settings":{}}', { kind: 'not-json' }],
      ['{"settings":{"eps":1},}', { kind: 'not-json' }],
      ['{"settings":[1,]}', { kind: 'not-json' }],
      ['{"settings":01}', { kind: 'not-json' }],
      ['{"settings":1.}', { kind: 'not-json' }],
      ['{"settings":tru}', { kind: 'not-json' }],
      ['{"settings":{}} {}', { kind: 'not-json' }],
      ['{"settings":"a\tb"}', { kind: 'not-json' }],
      ['{"settings":"\\x"}', { kind: 'not-json' }],
      ['{"settings":"\\u12g4"}', { kind: 'not-json' }],
      ['', { kind: 'not-json' }],
      ['{"settings":{"eps":1}', { kind: 'not-json' }],
    ];
    for (const [text, expected] of cases) {
      expect(bodySettingsMember(Buffer.from(text)), text).toEqual(expected);
      check(text);
    }
  });

  it('reads bytes that are not UTF-8 as JSON.parse reads their replacement characters', () => {
    check(Buffer.concat([Buffer.from('{"a":"'), Buffer.from([0xe2, 0x82]), Buffer.from('","settings":{"eps":3}}')]));
    check(Buffer.concat([Buffer.from('{"settings":{"name":"'), Buffer.from([0xff, 0xc3]), Buffer.from('"}}')]));
    check(Buffer.concat([Buffer.from('{"settings":{}'), Buffer.from([0xc3]), Buffer.from('}')]));
  });

  it('does not need the call stack for deep nesting', () => {
    const depth = 100_000;
    check(`{"features":${'['.repeat(depth)}${']'.repeat(depth)},"settings":{"eps":7}}`);
    check(`{"features":${'{"a":'.repeat(depth)}1${'}'.repeat(depth)},"settings":{"eps":7}}`);
  });

  it(`agrees with JSON.parse on seeded documents, whole and broken (seed ${SEED}, ${CASES} cases)`, () => {
    console.info(`body settings seed ${SEED} (ROOST_SEED), ${CASES} cases (ROOST_CASES)`);
    const r = rng(SEED).next;
    const pick = <T>(xs: readonly T[]): T => xs[Math.floor(r() * xs.length)]!;
    const names = ['settings', 'settin\\u0067s', '\\u0073ettings', 'Settings', 'setting', 'settings ', 'type', 'features', 'eps', 'a\\"b', 'é', ''];
    const strings = ['', 'settings', '"settings"', 'a\\nb', '\\u00e9\\ud83d\\ude00', 'é—😀', '\\\\', 'x\\/y', '\\ud800'];
    const numbers = ['0', '-0', '12', '-3.25', '1e5', '2.5E-7', '6.02e+23', '-0.0'];
    const value = (depth: number): string => {
      const k = depth > 3 ? Math.floor(r() * 4) : Math.floor(r() * 6);
      if (k === 0) return `"${pick(strings)}"`;
      if (k === 1) return pick(numbers);
      if (k === 2) return pick(['true', 'false', 'null']);
      if (k === 3) return `${pick(['', ' '])}"${pick(strings)}"`;
      if (k === 4) return `[${Array.from({ length: Math.floor(r() * 4) }, () => value(depth + 1)).join(pick([',', ' , ', ',\n']))}]`;
      return object(depth + 1);
    };
    const object = (depth: number): string =>
      `{${Array.from({ length: Math.floor(r() * 4) }, () => `"${pick(names)}"${pick([':', ' : ', ':\t'])}${value(depth)}`).join(pick([',', ', ', '\r\n,']))}}`;
    const noise = [0x22, 0x5c, 0x2c, 0x3a, 0x7b, 0x7d, 0x5b, 0x5d, 0x20, 0x0a, 0x09, 0x00, 0x1f, 0x30, 0x2d, 0x65, 0x2e, 0x75, 0x80, 0xc3, 0xe2, 0xff];
    const kinds = { whole: 0, cut: 0, put: 0, taken: 0, changed: 0 };
    const answers = { 'not-json': 0, absent: 0, present: 0 };
    for (let c = 0; c < CASES; c++) {
      const top = r() < 0.9 ? object(0) : value(0);
      const text = `${pick(['', ' ', '\n'])}${top}${pick(['', ' ', '\r\n'])}`;
      let bytes = Buffer.from(text);
      const how = Math.floor(r() * 5);
      const at = Math.floor(r() * (bytes.length + 1));
      const byte = Buffer.from([r() < 0.7 ? pick(noise) : Math.floor(r() * 256)]);
      if (how === 1) {
        bytes = bytes.subarray(0, at);
        kinds.cut++;
      } else if (how === 2) {
        bytes = Buffer.concat([bytes.subarray(0, at), byte, bytes.subarray(at)]);
        kinds.put++;
      } else if (how === 3 && bytes.length > 0) {
        bytes = Buffer.concat([bytes.subarray(0, at), bytes.subarray(at + 1)]);
        kinds.taken++;
      } else if (how === 4 && at < bytes.length) {
        bytes = Buffer.concat([bytes.subarray(0, at), byte, bytes.subarray(at + 1)]);
        kinds.changed++;
      } else kinds.whole++;
      answers[check(bytes)]++;
    }
    // every kind of document was drawn, and the three answers all occurred
    for (const [kind, count] of Object.entries({ ...kinds, ...answers })) expect(count, kind).toBeGreaterThan(CASES / 20);
  });
});
