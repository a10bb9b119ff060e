/**
 * scikit-learn from Debian's python3-sklearn, run as `/usr/bin/python3` (the system interpreter,
 * where Debian installs it, not whatever `python3` is first on PATH). On a developer's machine the
 * suites that need it are skipped with the reason when it is missing; under CI (`CI=true`) a
 * missing scikit-learn is an error, so a run can never be green with those checks left out
 * (`.ci/run` installs python3-sklearn).
 */
import { execFileSync } from 'node:child_process';
import { isCi } from './postgres.js';

export const SYSTEM_PYTHON = '/usr/bin/python3';

/** null when scikit-learn imports, else why not. @throws Error when missing under CI */
export function sklearnSkipReason(env: NodeJS.ProcessEnv = process.env): string | null {
  let reason: string | null = null;
  try {
    execFileSync(SYSTEM_PYTHON, ['-c', 'import sklearn'], { stdio: 'pipe' });
  } catch (e) {
    reason = `scikit-learn is not available to ${SYSTEM_PYTHON} (${(e as Error).message.split('\n')[0]}); install python3-sklearn`;
  }
  if (reason !== null && isCi(env)) throw new Error(`${reason}. CI=true: the scikit-learn checks must run in CI (.ci/run installs python3-sklearn)`);
  return reason;
}

/** Runs a Python script with `input` as JSON on stdin; returns what it prints to stdout, parsed as JSON. */
export function python<T>(script: string, input: unknown): T {
  const out = execFileSync(SYSTEM_PYTHON, ['-c', script], { input: JSON.stringify(input), maxBuffer: 64 * 1024 * 1024, stdio: ['pipe', 'pipe', 'pipe'] });
  return JSON.parse(out.toString('utf8')) as T;
}
