import { describe, expect, it } from 'vitest';
import { HttpProblem, PROBLEMS, problemType, type ProblemCode } from '../../src/http/errors.js';
import { schemaErrors, spec } from './helper.js';

type Json = Record<string, unknown>;

/** Problem schemas in openapi.yaml: those whose allOf pins a `code` with const. */
function specProblems(): Map<string, { schema: string; status: unknown; type: unknown; title: unknown }> {
  const out = new Map<string, { schema: string; status: unknown; type: unknown; title: unknown }>();
  for (const [name, schema] of Object.entries(spec.components.schemas)) {
    for (const part of (schema.allOf as Json[] | undefined) ?? []) {
      const props = part.properties as Record<string, Json> | undefined;
      if (props?.code && 'const' in props.code) {
        out.set(String(props.code.const), { schema: name, status: props.status?.const, type: props.type?.const, title: props.title?.const });
      }
    }
  }
  return out;
}

describe('error catalogue and openapi.yaml agree', () => {
  const documented = specProblems();

  it('every code in the catalogue has a schema in the spec with the same status, type and title, and no other exists', () => {
    expect([...documented.keys()].sort()).toEqual(Object.keys(PROBLEMS).sort());
    for (const [code, def] of Object.entries(PROBLEMS)) {
      const d = documented.get(code)!;
      expect(d.status, code).toBe(def.status);
      expect(d.title, code).toBe(def.title);
      expect(d.type, code).toBe(problemType(code as ProblemCode));
    }
  });

  it('the ProblemCode enum lists exactly the catalogue', () => {
    expect([...(spec.components.schemas.ProblemCode!.enum as string[])].sort()).toEqual(Object.keys(PROBLEMS).sort());
  });

  it('the table in the description lists every code with its status', () => {
    const text = String((spec.info as Json).description);
    for (const [code, def] of Object.entries(PROBLEMS)) expect(text).toContain(`| \`${code}\` | ${def.status} |`);
  });

  it('every status of the catalogue is answered by some operation with the problem media type', () => {
    const statuses = new Set<string>();
    for (const item of Object.values(spec.paths)) {
      for (const op of Object.values(item)) {
        for (const status of Object.keys((op.responses as Json) ?? {})) statuses.add(status);
      }
    }
    for (const def of Object.values(PROBLEMS)) expect(statuses.has(String(def.status)), String(def.status)).toBe(true);
  });

  it('bodies built from the catalogue validate against their own schema', () => {
    for (const code of Object.keys(PROBLEMS) as ProblemCode[]) {
      const extensions: Record<string, unknown> =
        code === 'invalid-parameter'
          ? { parameter: 'eps' }
          : code === 'invalid-observations'
            ? { problems: [{ index: 3, id: 'a', code: 'out-of-range', message: 'longitude 500 is out of range' }], problems_total: 1 }
            : {};
      const body = new HttpProblem(code, 'what went wrong', extensions).body('req-1');
      expect(schemaErrors(`openapi#/components/schemas/${documented.get(code)!.schema}`, body), code).toBe('');
      // a body claiming another kind's status fails: the schemas pin the status
      expect(schemaErrors(`openapi#/components/schemas/${documented.get(code)!.schema}`, { ...body, status: 299 })).not.toBe('');
    }
  });
});
