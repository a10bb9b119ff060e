/**
 * The worker-thread side of the service: reads the request body, checks the settings, clusters
 * (or computes the k-distance curve) and encodes the response bytes, all off the main thread.
 * Every outcome is returned as a WorkResult; errors caused by the client are never thrown, so
 * their kind survives the trip back to the main thread.
 */
import { Buffer } from 'node:buffer';
import { Piscina } from 'piscina';
import { InputError } from '../ingest/types.js';
import { resultDocument, suggestEpsInput } from '../run/cluster.js';
import { resolveSettings, SettingsError } from '../run/settings.js';
import { sweepInput, sweepRequest } from '../run/sweep.js';
import { SweepError } from '../trust/sweep.js';
import { assessHere, clusterCases } from '../trust/assess.js';
import { resolveTrustSettings, splitTrustSettings } from '../trust/options.js';
import { readStudyArea } from '../trust/study-area.js';
import type { InputFile } from '../ingest/source.js';
import { ArrivalStopped, ArrivingSource, type ArrivingShare } from './arriving.js';
import { bodySettingsMember } from './body-settings.js';
import { MAX_LISTED_PROBLEMS } from './errors.js';
import type { WorkRejected, WorkResult, WorkTask } from './work.js';

const SETTINGS_KEY = Buffer.from('"settings"');

/**
 * The `settings` member of a JSON body, or an empty object when there is none.
 * The body is looked at only when the bytes `"settings"` occur in it, so the common case
 * (settings in the query string) reads the body once, in the reader; and then only the member's
 * own text is parsed (`body-settings.ts`). A body that is not JSON gives no settings here: the
 * reader reports the syntax error with its position.
 */
function bodySettings(body: Buffer): { settings: Record<string, unknown> } | { rejected: WorkRejected } {
  if (body.indexOf(SETTINGS_KEY) < 0) return { settings: {} };
  const member = bodySettingsMember(body);
  if (member.kind !== 'present') return { settings: {} };
  const settings = member.value;
  if (settings === null || typeof settings !== 'object' || Array.isArray(settings)) {
    const detail = 'the "settings" member must be an object such as {"eps": 250, "min_points": 5}';
    return { rejected: { ok: false, code: 'invalid-parameter', detail, extensions: { parameter: 'settings' } } };
  }
  return { settings: settings as Record<string, unknown> };
}

/** Bytes in their own ArrayBuffer (never Node's shared small-buffer pool), safe to transfer. */
function ownBytes(text: string): Uint8Array {
  const bytes = Buffer.allocUnsafeSlow(Buffer.byteLength(text, 'utf8'));
  bytes.write(text, 'utf8');
  return bytes;
}

/** Wraps a success so piscina transfers the body's ArrayBuffer instead of copying it. */
function done(contentType: string, content: string | Uint8Array): WorkResult {
  const body = typeof content === 'string' ? ownBytes(content) : content;
  const value: WorkResult = { ok: true, contentType, body };
  return Piscina.move({
    get [Piscina.transferableSymbol]() {
      return body.buffer;
    },
    get [Piscina.valueSymbol]() {
      return value;
    },
  } as unknown as ArrayBuffer) as unknown as WorkResult;
}

/** Whole-input problems that mean the body is not a readable document at all (400, not 422). */
const UNREADABLE = /^(malformed-|not-geojson$)/;

function rejectInput(err: InputError): WorkResult {
  const codes = err.problems.map((p) => p.code);
  if (codes.includes('too-many-features')) {
    return { ok: false, code: 'body-too-large', detail: err.message, extensions: {} };
  }
  const unreadable = codes.length > 0 && codes.every((c) => UNREADABLE.test(c));
  const listed = err.problems.slice(0, MAX_LISTED_PROBLEMS).map((p) => {
    const out: Record<string, unknown> = { index: p.index };
    // an id that is itself the problem (an object, say) is described in the message instead
    if (typeof p.id === 'string' || typeof p.id === 'number') out.id = p.id;
    out.code = p.code;
    out.message = p.message;
    return out;
  });
  return {
    ok: false,
    code: unreadable ? 'malformed-body' : 'invalid-observations',
    detail: err.message,
    extensions: { problems: listed, problems_total: Math.max(err.total, err.problems.length) },
  };
}

/** Runs one task; the default export piscina calls. */
export default function work(task: WorkTask): WorkResult {
  if (task.arriving !== undefined) return workArriving(task, task.arriving);
  const body = Buffer.from(task.body.buffer, task.body.byteOffset, task.body.byteLength);
  const fromBody = task.format === 'geojson' ? bodySettings(body) : { settings: {} };
  if ('rejected' in fromBody) return fromBody.rejected;
  return answer(task, body, fromBody.settings);
}

/**
 * A clustering read from a body while it arrives (src/http/arriving.ts). Its answer is the one
 * the body read whole would have had, as long as the body has no `settings` member (which is read
 * from the whole body before anything else): when the body has a settings member that sets
 * anything, it is read again whole here with those settings (the bytes `"settings"` elsewhere in
 * it, in a property, say, or an empty member, leave the answer as it was); when the work ended before the last byte was in (settings that need the
 * body's, say) or the thread is wanted for another request, the main thread's ordinary task reads
 * it once the upload has ended (`read-again`).
 */
function workArriving(task: WorkTask, share: ArrivingShare): WorkResult {
  const source = new ArrivingSource(share);
  let result: WorkResult;
  try {
    result = answer(task, source, {});
  } catch (err) {
    if (err instanceof ArrivalStopped) return { ok: false, code: err.why === 'failed' ? 'abandoned' : 'read-again' };
    throw err;
  }
  if (!source.allIn) return { ok: false, code: 'read-again' };
  if (task.format !== 'geojson') return result;
  const body = Buffer.from(share.bytes, 0, source.size);
  const fromBody = bodySettings(body);
  if ('rejected' in fromBody) return fromBody.rejected;
  // settings of its own in the body come before everything else: the body is read again with them
  if (Object.keys(fromBody.settings).length > 0) return answer(task, body, fromBody.settings);
  return result;
}

/** The task's answer from its input (the body, or the body as it arrives) and the body's settings member. */
function answer(task: WorkTask, input: Buffer | InputFile, fromBody: Record<string, unknown>): WorkResult {
  // the sweep and the k-distance curve read the body whole
  const whole = (): Buffer => (Buffer.isBuffer(input) ? input : input.readAll());
  try {
    // the query string wins over the body's settings member, parameter by parameter
    // k-distance is how eps is chosen, so it needs none
    const base = task.op === 'k-distance' ? { eps: 'auto' } : {};
    if (task.op === 'sweep') {
      const { grid, settings: sweepSettings } = sweepRequest({ ...fromBody, ...task.query });
      return done('application/json', JSON.stringify(sweepInput(whole(), task.format, sweepSettings, grid!)));
    }
    if (task.op === 'k-distance') {
      const settings = resolveSettings({ ...base, ...fromBody, ...task.query });
      return done('application/json', JSON.stringify(suggestEpsInput(whole(), task.format, settings)));
    }
    // the study area of the csr null model is a polygon, given only in the body's settings member
    const { study_area: areaGiven, ...given } = { ...fromBody, ...task.query };
    const { clustering, trust: trustGiven } = splitTrustSettings(given);
    const settings = resolveSettings(clustering);
    const trust = resolveTrustSettings(trustGiven);
    const studyArea = areaGiven === undefined || areaGiven === null ? null : readStudyArea(JSON.stringify(areaGiven));
    if (studyArea !== null && (trust.simulations === 0 || trust.nullModel !== 'csr')) throw new SettingsError('study_area', 'is where the csr null model places points; ask for null_model=csr');
    // one layer alone carries no summary, so the summary's Clark–Evans test is not computed for it
    const { result, effort } = clusterCases(input, task.format, settings, trust, task.layer === null ? {} : { clarkEvans: false });
    if (trust.simulations > 0 || trust.resamples > 0) assessHere(result, settings, { settings: trust, studyArea, effort });
    if (task.layer === null) return done('application/json', resultDocument(result));
    return done('application/geo+json', result.layers[task.layer].bytes());
  } catch (err) {
    // the body stopped arriving or the thread is wanted: not an answer, the caller decides
    if (err instanceof ArrivalStopped) throw err;
    if (err instanceof SettingsError || err instanceof SweepError) {
      return { ok: false, code: 'invalid-parameter', detail: err.message, extensions: { parameter: err.parameter } };
    }
    if (err instanceof InputError) return rejectInput(err);
    const e = err instanceof Error ? err : new Error(String(err));
    return { ok: false, code: 'internal-error', detail: e.message, stack: e.stack };
  }
}
