/** How a query's `where` conditions match stored properties, for both engines. */
import type { WhereCondition } from './store.js';

/**
 * How a `where` value can match: always as a string; also as a boolean, null or number when the
 * text is exactly how that value is written (JavaScript's `String(v)`), which is the rule of the
 * file filter in src/ingest/filter.ts.
 */
export interface WhereMatch {
  property: string;
  text: string;
  bool: boolean | null;
  isNull: boolean;
  number: number | null;
}

export function whereMatches(where: WhereCondition[] | undefined): WhereMatch[] {
  return (where ?? []).map((c) => {
    const n = Number(c.value);
    return {
      property: c.property,
      text: c.value,
      bool: c.value === 'true' ? true : c.value === 'false' ? false : null,
      isNull: c.value === 'null',
      number: Number.isFinite(n) && String(n) === c.value ? n : null,
    };
  });
}
