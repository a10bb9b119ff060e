/**
 * Limits on what one feature may hold, checked by every reader so that anything accepted can be
 * written out again, stored, and queried later on either store:
 *
 * - nesting: at most MAX_DEPTH levels of objects and arrays, the feature itself being level 1 (so
 *   its properties may nest 30 levels). Deeper values overflowed the stack when written out again
 *   and went past SQLite's JSON depth limit of 1 000, after which every `where` query of the
 *   dataset failed;
 * - text: a string value at most MAX_STRING_CHARS characters, a member name (property key) at most
 *   MAX_KEY_CHARS, an id at most MAX_ID_CHARS;
 * - member names and ids hold no NUL (U+0000) and no lone surrogate (half of a UTF-16 pair, which
 *   is not a Unicode character and has no UTF-8 form): PostgreSQL cannot store the first in text,
 *   its JSON type refuses both, and the second would turn into U+FFFD on the way to the database,
 *   so two different ids could become one;
 * - for observations to be stored, string values anywhere in the feature follow the same rule
 *   (refused, not rewritten: an observation is stored as sent or not at all, the same on both
 *   stores). Clustering a posted file (`/v1/cluster`, `roost cluster`) stores nothing, so there
 *   values are left as they are.
 *
 * The walk uses an explicit stack, so no input can overflow the call stack here.
 */

/** Most levels of objects and arrays in a feature, the feature itself being level 1. */
export const MAX_DEPTH = 32;
/** Longest string value, in UTF-16 code units (characters for almost all text). */
export const MAX_STRING_CHARS = 65_536;
/** Longest member name (property key). */
export const MAX_KEY_CHARS = 256;
/** Longest observation id. */
export const MAX_ID_CHARS = 256;

/** A problem with one feature's content: a stable code and the message's tail (after "feature 3: "). */
export interface ContentProblem {
  code: 'too-deep' | 'text-too-long' | 'bad-property-name' | 'bad-id' | 'bad-text';
  message: string;
}

interface WellFormed {
  isWellFormed(): boolean;
}

/** Why the text cannot be kept as it is (a NUL or a lone surrogate), or null when it can. */
export function textFault(s: string): string | null {
  if (s.includes('\u0000')) return 'a NUL character (U+0000)';
  if (!(s as unknown as WellFormed).isWellFormed()) return 'a lone surrogate (half of a UTF-16 pair, not a character)';
  return null;
}

/** A short, printable form of a text for messages. */
function shown(s: string): string {
  // JSON escapes NUL and lone surrogates (\u0000, \udc00), so the message stays plain text
  return JSON.stringify(s.length > 40 ? `${s.slice(0, 40)}…` : s);
}

/** What is wrong with an id given as text, or null. */
export function idProblem(id: string): ContentProblem | null {
  if (id.length > MAX_ID_CHARS) return { code: 'bad-id', message: `the id is ${id.length} characters long; ids may have at most ${MAX_ID_CHARS}` };
  const fault = textFault(id);
  if (fault !== null) return { code: 'bad-id', message: `the id ${shown(id)} holds ${fault}; ids must be plain text` };
  return null;
}

/**
 * The first thing in the feature that breaks a limit (see the header), or null. With `values`,
 * string values are held to the id rule too (for observations to be stored).
 */
export function contentProblem(feature: unknown, values: boolean): ContentProblem | null {
  if (typeof feature !== 'object' || feature === null) return null;
  const id = (feature as { id?: unknown }).id;
  if (typeof id === 'string') {
    const p = idProblem(id);
    if (p !== null) return p;
  }
  // [value, depth, path]; the path is built only for objects, and only names, for messages
  const stack: [unknown, number, string][] = [[feature, 1, '']];
  while (stack.length > 0) {
    const [v, depth, path] = stack.pop()!;
    if (depth > MAX_DEPTH) {
      return { code: 'too-deep', message: `nests objects and arrays more than ${MAX_DEPTH} levels deep (at ${path || 'the feature'}); flatten the properties` };
    }
    if (Array.isArray(v)) {
      for (let k = v.length - 1; k >= 0; k--) {
        const x: unknown = v[k];
        if (typeof x === 'string') {
          const p = stringProblem(x, `${path}[${k}]`, values);
          if (p !== null) return p;
        } else if (typeof x === 'object' && x !== null) stack.push([x, depth + 1, `${path}[${k}]`]);
      }
      continue;
    }
    for (const key of Object.keys(v as object)) {
      if (key.length > MAX_KEY_CHARS) return { code: 'bad-property-name', message: `has a member name ${key.length} characters long (${shown(key)}); names may have at most ${MAX_KEY_CHARS}` };
      const fault = textFault(key);
      if (fault !== null) return { code: 'bad-property-name', message: `has a member name ${shown(key)} holding ${fault}; names must be plain text` };
      const x: unknown = (v as Record<string, unknown>)[key];
      const at = path === '' ? key : `${path}.${key}`;
      if (typeof x === 'string') {
        const p = stringProblem(x, at, values);
        if (p !== null) return p;
      } else if (typeof x === 'object' && x !== null) stack.push([x, depth + 1, at]);
    }
  }
  return null;
}

function stringProblem(s: string, at: string, values: boolean): ContentProblem | null {
  if (s.length > MAX_STRING_CHARS) return { code: 'text-too-long', message: `${at} is a text of ${s.length} characters; at most ${MAX_STRING_CHARS} are accepted` };
  if (values) {
    const fault = textFault(s);
    if (fault !== null) return { code: 'bad-text', message: `${at} holds ${fault}, which cannot be stored; remove it` };
  }
  return null;
}
