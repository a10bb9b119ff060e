/**
 * The HTTP layer stays readable: no function in src/http runs over MAX_LINES lines, counted with
 * the TypeScript compiler from the line of its first token to the line of its last, nested
 * functions included (a route group that defines its handlers inline is as long as all of them).
 * A long function is split into named handlers and helpers whose names say what they do.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { join, relative } from 'node:path';
import { fileURLToPath } from 'node:url';
import ts from 'typescript';
import { describe, expect, it } from 'vitest';

const HTTP = fileURLToPath(new URL('../../src/http/', import.meta.url));

/** Longest function allowed, in lines (a rule of thumb: about one screen). */
const MAX_LINES = 80;

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const p = join(dir, name);
    return statSync(p).isDirectory() ? sourceFiles(p) : p.endsWith('.ts') && !p.endsWith('.d.ts') ? [p] : [];
  });
}

interface FunctionLength {
  /** `routes/changes.ts:84 changeRoutes` */
  where: string;
  lines: number;
}

/** What to call a function in a report: its own name, else the name it is assigned to, else its kind. */
function nameOf(node: ts.FunctionLikeDeclaration): string {
  if (node.name !== undefined) return node.name.getText();
  const parent = node.parent;
  if (ts.isVariableDeclaration(parent) || ts.isPropertyAssignment(parent) || ts.isPropertyDeclaration(parent)) return parent.name.getText();
  if (ts.isCallExpression(parent)) return `(function passed to ${parent.expression.getText().slice(0, 40)})`;
  return `(${ts.SyntaxKind[node.kind]})`;
}

/** The length in lines of every function-like declaration of one source text (nested ones too). */
export function functionLengths(fileName: string, text: string): FunctionLength[] {
  const source = ts.createSourceFile(fileName, text, ts.ScriptTarget.ES2022, true, ts.ScriptKind.TS);
  const out: FunctionLength[] = [];
  const visit = (node: ts.Node): void => {
    if (ts.isFunctionLike(node) && 'body' in node && node.body !== undefined) {
      const f = node as ts.FunctionLikeDeclaration;
      const first = source.getLineAndCharacterOfPosition(f.getStart(source)).line;
      const last = source.getLineAndCharacterOfPosition(f.getEnd()).line;
      out.push({ where: `${fileName}:${first + 1} ${nameOf(f)}`, lines: last - first + 1 });
    }
    ts.forEachChild(node, visit);
  };
  visit(source);
  return out;
}

describe('functions in src/http', () => {
  it(`measures a function's lines from its first token to its last, nested functions included`, () => {
    const text = ['export async function outer(): Promise<void> {', '  const inner = (): number => {', '    return 1;', '  };', '  inner();', '}', 'const arrow = (x: number) => x + 1;'].join('\n');
    const found = functionLengths('sample.ts', text);
    expect(found).toEqual([
      { where: 'sample.ts:1 outer', lines: 6 },
      { where: 'sample.ts:2 inner', lines: 3 },
      { where: 'sample.ts:7 arrow', lines: 1 },
    ]);
  });

  it(`are at most ${MAX_LINES} lines long`, () => {
    const files = sourceFiles(HTTP);
    const all = files.flatMap((f) => functionLengths(relative(HTTP, f), readFileSync(f, 'utf8')));
    // the walk found the route groups and their handlers
    expect(files.length).toBeGreaterThan(20);
    expect(all.length).toBeGreaterThan(200);
    const long = all.filter((f) => f.lines > MAX_LINES).map((f) => `${f.where}: ${f.lines} lines`);
    expect(long).toEqual([]);
  });
});
