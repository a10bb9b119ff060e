/**
 * The `settings` member of a JSON request body, found without parsing the body into objects.
 *
 * A clustering body is mostly its `features` array; its optional `settings` member is a few bytes.
 * Parsing the whole body with `JSON.parse` to read those few bytes would build every feature as
 * objects (about six times the body's size in memory, and seconds at a million points), so the
 * body is checked here byte by byte against the JSON grammar (RFC 8259) instead, and only the
 * settings member's own text is parsed. The answer is always the one
 * `JSON.parse(body.toString('utf8'))` would give: the same documents are refused (UTF-8 that is
 * not valid becomes U+FFFD there, which JSON allows in strings, so bytes are not checked as
 * UTF-8 here either), member names are compared after their escapes are read, and of several
 * `settings` members the last one counts. `test/http/body-settings.test.ts` holds the two to the
 * same answers on seeded random and broken documents.
 */

/** What the body says about its top-level `settings` member. */
export type BodySettings =
  /** the body is not one JSON text */
  | { kind: 'not-json' }
  /** a JSON text that is not an object, or an object without a `settings` member */
  | { kind: 'absent' }
  /** the value of the (last) top-level `settings` member */
  | { kind: 'present'; value: unknown };

// byte values of the JSON grammar
const SPACE = 0x20, TAB = 0x09, LF = 0x0a, CR = 0x0d;
const QUOTE = 0x22, BACKSLASH = 0x5c, COMMA = 0x2c, COLON = 0x3a;
const OPEN_BRACE = 0x7b, CLOSE_BRACE = 0x7d, OPEN_BRACKET = 0x5b, CLOSE_BRACKET = 0x5d;
const MINUS = 0x2d, PLUS = 0x2b, DOT = 0x2e, ZERO = 0x30, NINE = 0x39;

const NAME = Buffer.from('settings');

/** A place where the text stops being JSON. */
class NotJson extends Error {}
const notJson = new NotJson();

/**
 * The top-level `settings` member of a JSON body, as `JSON.parse` of the whole body would find it.
 *
 * @param body the request body (UTF-8 JSON)
 */
export function bodySettingsMember(body: Uint8Array): BodySettings {
  try {
    return new Scan(body).document();
  } catch (err) {
    if (err === notJson) return { kind: 'not-json' };
    throw err;
  }
}

/** One pass over the body: `document` reads it whole, `value` skips one value of any kind. */
class Scan {
  private i = 0;

  constructor(private readonly b: Uint8Array) {}

  document(): BodySettings {
    this.space();
    let found: BodySettings = { kind: 'absent' };
    if (this.b[this.i] === OPEN_BRACE) {
      // the top-level object, member by member
      this.i++;
      this.space();
      if (this.b[this.i] === CLOSE_BRACE) this.i++;
      else {
        for (;;) {
          if (this.b[this.i] !== QUOTE) throw notJson;
          const nameStart = this.i;
          this.i = skipString(this.b, nameStart);
          const name = this.b.subarray(nameStart, this.i);
          // a name with escapes is compared as JSON.parse reads it
          const isSettings = name.includes(BACKSLASH)
            ? JSON.parse(Buffer.from(name.buffer, name.byteOffset, name.length).toString('utf8')) === 'settings'
            : this.plainNameIs(nameStart);
          this.space();
          if (this.b[this.i] !== COLON) throw notJson;
          this.i++;
          this.space();
          const valueStart = this.i;
          this.value();
          if (isSettings) {
            const text = Buffer.from(this.b.buffer, this.b.byteOffset + valueStart, this.i - valueStart).toString('utf8');
            found = { kind: 'present', value: JSON.parse(text) };
          }
          this.space();
          const c = this.b[this.i++];
          if (c === CLOSE_BRACE) break;
          if (c !== COMMA) throw notJson;
          this.space();
        }
      }
    } else this.value();
    this.space();
    if (this.i !== this.b.length) throw notJson;
    return found;
  }

  /** Whether the name without escapes whose opening quote is at `start` (and closing quote just before `i`) is `settings`. */
  private plainNameIs(start: number): boolean {
    if (this.i - start !== NAME.length + 2) return false;
    for (let k = 0; k < NAME.length; k++) if (this.b[start + 1 + k] !== NAME[k]) return false;
    return true;
  }

  private space(): void {
    const b = this.b;
    let i = this.i;
    for (let c = b[i]; c === SPACE || c === LF || c === CR || c === TAB; c = b[++i]);
    this.i = i;
  }

  /**
   * Skips one value. One loop with its place in local variables: nested arrays and objects are
   * kept on a stack of their kinds (so depth costs no call stack), strings and numbers are read
   * inline, since a body is mostly short strings and numbers.
   */
  private value(): void {
    const b = this.b;
    let i = this.i;
    let open = new Uint8Array(64); // 1 object, 2 array
    let depth = 0;
    for (;;) {
      // a value starts at i (space before it already skipped)
      let c = b[i];
      if (c === QUOTE) i = skipString(b, i);
      else if (c === MINUS || (c >= ZERO && c <= NINE)) {
        if (c === MINUS) c = b[++i];
        if (c === ZERO) c = b[++i];
        else if (c > ZERO && c <= NINE) do c = b[++i]; while (c >= ZERO && c <= NINE);
        else throw notJson;
        if (c === DOT) {
          c = b[++i];
          if (!(c >= ZERO && c <= NINE)) throw notJson;
          do c = b[++i]; while (c >= ZERO && c <= NINE);
        }
        if (c === 0x65 || c === 0x45) {
          c = b[++i];
          if (c === PLUS || c === MINUS) c = b[++i];
          if (!(c >= ZERO && c <= NINE)) throw notJson;
          do c = b[++i]; while (c >= ZERO && c <= NINE);
        }
      } else if (c === OPEN_BRACE || c === OPEN_BRACKET) {
        const inObject = c === OPEN_BRACE;
        i++;
        while ((c = b[i]) === SPACE || c === LF || c === CR || c === TAB) i++;
        if (c === (inObject ? CLOSE_BRACE : CLOSE_BRACKET)) i++;
        else {
          if (depth === open.length) {
            const grown = new Uint8Array(depth * 2);
            grown.set(open);
            open = grown;
          }
          open[depth++] = inObject ? 1 : 2;
          if (inObject) i = memberName(b, i);
          continue;
        }
      } else if (c === 0x74) i = word(b, i, 'true');
      else if (c === 0x66) i = word(b, i, 'false');
      else if (c === 0x6e) i = word(b, i, 'null');
      else throw notJson;
      // after a value: a comma to the next, or the closing brackets of the containers it ends
      for (;;) {
        if (depth === 0) {
          this.i = i;
          return;
        }
        while ((c = b[i]) === SPACE || c === LF || c === CR || c === TAB) i++;
        i++;
        const inObject = open[depth - 1] === 1;
        if (c === COMMA) {
          while ((c = b[i]) === SPACE || c === LF || c === CR || c === TAB) i++;
          if (inObject) i = memberName(b, i);
          break;
        }
        if (c !== (inObject ? CLOSE_BRACE : CLOSE_BRACKET)) throw notJson;
        depth--;
      }
    }
  }

}

/** Skips the string whose opening quote is at `i`; returns the index after its closing quote. */
function skipString(b: Uint8Array, i: number): number {
  const n = b.length;
  for (i++; ; ) {
    if (i >= n) throw notJson;
    const c = b[i++];
    if (c === QUOTE) return i;
    if (c < 0x20) throw notJson;
    if (c === BACKSLASH) {
      const e = b[i++];
      if (e === 0x75) {
        // \uXXXX
        for (let k = 0; k < 4; k++, i++) if (!isHex(b[i])) throw notJson;
      } else if (!(e === QUOTE || e === BACKSLASH || e === 0x2f || e === 0x62 || e === 0x66 || e === 0x6e || e === 0x72 || e === 0x74)) throw notJson;
    }
  }
}

/** Skips a member name at `i`, its colon and the space after it; returns where the value starts. */
function memberName(b: Uint8Array, i: number): number {
  if (b[i] !== QUOTE) throw notJson;
  i = skipString(b, i);
  let c: number;
  while ((c = b[i]) === SPACE || c === LF || c === CR || c === TAB) i++;
  if (c !== COLON) throw notJson;
  i++;
  while ((c = b[i]) === SPACE || c === LF || c === CR || c === TAB) i++;
  return i;
}

/** Skips the literal `w` at `i`; returns the index after it. */
function word(b: Uint8Array, i: number, w: string): number {
  for (let k = 0; k < w.length; k++) if (b[i + k] !== w.charCodeAt(k)) throw notJson;
  return i + w.length;
}

const isHex = (c: number | undefined): boolean =>
  c !== undefined && ((c >= ZERO && c <= NINE) || (c >= 0x41 && c <= 0x46) || (c >= 0x61 && c <= 0x66));
