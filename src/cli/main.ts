/**
 * The `roost` command line: the same work as the HTTP service, on files.
 *
 *   roost cluster <input> --eps <metres> --min-points <n> --out-dir <dir> [options]
 *   roost suggest-eps <input> --min-points <n>
 *   roost sweep <input> --eps <list> --min-points <list>
 *   roost serve [options]
 *   roost keys create|list|revoke
 */
import { readFile } from 'node:fs/promises';
import { basename } from 'node:path';
import { Command, Option } from 'commander';
import { InputError } from '../ingest/types.js';
import { suggestEpsInput, type ClusterResult, type InputFormat, type PointLayersJob, type Stage } from '../run/cluster.js';
import { readObservations } from '../ingest/read.js';
import { InputFile } from '../ingest/source.js';
import { assess, clusterCases, type EffortPoints } from '../trust/assess.js';
import { resolveTrustSettings, type TrustSettings } from '../trust/options.js';
import { readStudyArea, type StudyArea } from '../trust/study-area.js';
import { defaultThreads } from '../trust/trials.js';
import { sweepInput, sweepTable } from '../run/sweep.js';
import { sweepGrid, SweepError } from '../trust/sweep.js';
import { LAYER_NAMES, type LayerName } from '../run/layers.js';
import { resolveSettings, SettingsError, type ClusterSettings } from '../run/settings.js';
import { publishedSummary, publishLayerTexts, PublishError, resolvePublishOptions, type PublishOptions } from '../publish/publish.js';
import { ROOST_VERSION } from '../run/version.js';
import { ResultFolder, writeResultFolder } from './output.js';
import { PointLayerThread } from './layer-thread.js';
import { keysCommand } from './keys.js';
import { reclusterCommand } from './recluster.js';
import { serveCommand } from './serve.js';

/** Exit codes: 0 done, 1 unexpected failure, 2 bad usage or settings, 3 bad input data. */
export const EXIT = { ok: 0, failure: 1, usage: 2, input: 3 } as const;

async function readInput(path: string): Promise<Buffer> {
  if (path === '-') {
    const chunks: Buffer[] = [];
    for await (const chunk of process.stdin) chunks.push(chunk as Buffer);
    return Buffer.concat(chunks);
  }
  return readFile(path);
}

function formatFromPath(path: string, explicit: string | undefined): InputFormat | undefined {
  if (explicit) return explicit as InputFormat;
  if (/\.csv$/i.test(path)) return 'csv';
  if (/\.(geojsons|geojsonl|geojsonseq|ndjson|jsonl)$/i.test(path)) return 'geojson-seq';
  if (/\.(geo)?json$/i.test(path)) return 'geojson';
  return undefined;
}

/** Progress on stderr, only for inputs large enough to make someone wait, and only on a terminal or when asked. */
function progressReporter(enabled: boolean): (stage: Stage, done: number) => void {
  let last = 0;
  return (stage, done) => {
    if (!enabled) return;
    const now = Date.now();
    if (done > 0 && done < 1 && now - last < 500) return;
    last = now;
    process.stderr.write(`roost: ${stage}${done > 0 ? ` ${Math.round(done * 100)}%` : ''}\n`);
  };
}

function settingsFromFlags(opts: Record<string, unknown>): Record<string, unknown> {
  return {
    method: opts.method,
    eps: opts.eps,
    min_points: opts.minPoints,
    weight: opts.weight,
    hull: opts.hull,
    concavity: opts.concavity,
    since: opts.since,
    until: opts.until,
    where: opts.where,
    count_by: opts.countBy,
    optics_max_eps: opts.opticsMaxEps,
    optics_extraction: opts.opticsExtraction,
    xi: opts.xi,
    min_cluster_size: opts.minClusterSize,
    lon_column: opts.lonColumn,
    lat_column: opts.latColumn,
    time_column: opts.timeColumn,
    time_format: opts.timeFormat,
    reference: opts.reference,
    validation: opts.validation,
  };
}

function fail(err: unknown): number {
  if (err instanceof InputError) {
    process.stderr.write(`roost: bad input: ${err.message}\n`);
    for (const p of err.problems.slice(0, 20)) {
      const where = p.index === null ? 'input' : `feature ${p.index}${p.id !== undefined ? ` (id ${JSON.stringify(p.id)})` : ''}`;
      process.stderr.write(`  ${where}: ${p.message} [${p.code}]\n`);
    }
    if (err.total > 20) process.stderr.write(`  … ${err.total - 20} more problem(s)\n`);
    process.stderr.write('roost: nothing was written\n');
    return EXIT.input;
  }
  if (err instanceof SettingsError || err instanceof PublishError || err instanceof SweepError) {
    process.stderr.write(`roost: ${err.message}\nroost: nothing was written\n`);
    return EXIT.usage;
  }
  const e = err as NodeJS.ErrnoException;
  if (e && e.code === 'ENOENT' && e.path) {
    process.stderr.write(`roost: cannot read ${e.path}: no such file\n`);
    return EXIT.usage;
  }
  process.stderr.write(`roost: ${e?.stack ?? String(err)}\nroost: nothing was written\n`);
  return EXIT.failure;
}

/** report.html for a command-line result (see src/report/report.ts). */
async function reportFile(result: ClusterResult, input: string): Promise<[string, Iterable<string>][]> {
  const { renderReport, reportData } = await import('../report/report.js');
  const text = (name: LayerName): string => result.layers[name].text();
  const data = await reportData({
    title: `${input === '-' ? 'standard input' : basename(input)}: ${String((result.summary.figures as { hotspots: number }).hotspots)} hotspot(s)`,
    dataset: null,
    run: null,
    summary: result.summary,
    hotspots: text('hotspots'),
    centres: text('centres'),
    noise: text('noise'),
    points: () => text('points'),
    observations: () => result.observations.points,
  });
  return [['report.html', [renderReport(data)]]];
}

const collect = (value: string, previous: string[] = []): string[] => [...previous, value];

/**
 * Publishing options from `roost cluster` flags; null when --generalise-m is absent (exact layers).
 * The other publishing flags need --generalise-m: publishing without generalising would show
 * outlines drawn through observations.
 */
function publishFromFlags(opts: Record<string, unknown>, countBy: string | null): PublishOptions | null {
  const given = ['minCount', 'withholdNoise', 'publishProperties'].filter((k) => opts[k] !== undefined);
  if (opts.generaliseM === undefined) {
    if (given.length > 0) throw new PublishError('generalise_m', '--min-count, --withhold-noise and --publish-properties make published layers, which need --generalise-m <metres>');
    return null;
  }
  const number = (v: unknown, flag: string): number => {
    const n = typeof v === 'string' && /^\s*\d+(\.\d+)?\s*$/.test(v) ? Number(v) : NaN;
    if (Number.isNaN(n)) throw new PublishError(flag, `${flag} must be a number, got ${JSON.stringify(v)}`);
    return n;
  };
  const props = typeof opts.publishProperties === 'string' ? opts.publishProperties.split(',').map((p) => p.trim()).filter((p) => p !== '') : [];
  try {
    return resolvePublishOptions(
      {
        generalise_m: number(opts.generaliseM, '--generalise-m'),
        min_count: opts.minCount === undefined ? undefined : number(opts.minCount, '--min-count'),
        noise: opts.withholdNoise ? 'withhold' : 'publish',
        properties: props,
      },
      countBy,
    );
  } catch (e) {
    if (e instanceof PublishError) throw new PublishError(e.field, e.message.replace(/^(generalise_m|min_count)/, (m) => `--${m.replace('_', '-')}`));
    throw e;
  }
}

function trustFromFlags(opts: Record<string, unknown>): TrustSettings {
  return resolveTrustSettings(
    {
      simulations: opts.simulations,
      seed: opts.seed,
      null_model: opts.null,
      effort_where: opts.effortWhere,
      resamples: opts.resamples,
      resample_share: opts.resampleShare,
      significance_level: opts.significanceLevel,
    },
    undefined,
    opts.effort !== undefined,
  );
}

/** Effort points from a file of observations (GeoJSON, CSV or a text sequence): their positions only. */
async function effortFromFile(path: string, settings: ClusterSettings): Promise<EffortPoints> {
  const obs = readObservations(await readInput(path), { format: formatFromPath(path, undefined), lonColumn: settings.lonColumn ?? undefined, latColumn: settings.latColumn ?? undefined });
  if (obs.points.n === 0) throw new SettingsError('effort', `${path} holds no effort points`);
  return { lon: obs.points.lon, lat: obs.points.lat, source: 'file' };
}

/** Simulation and resample progress on stderr, at most twice a second. */
function trialReporter(enabled: boolean): (what: string, done: number, total: number) => void {
  let last = 0;
  return (what, done, total) => {
    if (!enabled) return;
    const now = Date.now();
    if (done < total && now - last < 500) return;
    last = now;
    process.stderr.write(`roost: ${what} ${done}/${total}\n`);
  };
}

/** Builds the command tree; `run` is the testable entry point. */
export function buildProgram(setExit: (code: number) => void): Command {
  const program = new Command('roost')
    .description('Find where point observations gather: density-based hotspots on the sphere, as GeoJSON.')
    .version(ROOST_VERSION)
    .showHelpAfterError()
    .exitOverride();

  const common = (cmd: Command) =>
    cmd
      .addOption(new Option('--format <format>', 'input format (default: from the file name, else sniffed)').choices(['geojson', 'csv', 'geojson-seq']))
      .option('--min-points <n>', 'observations within eps (the point itself included) that make a core point', '5')
      .option('--weight <property>', 'numeric property holding each observation\'s weight (e.g. animals seen)')
      .option('--since <time>', 'keep observations observed at or after this RFC 3339 time')
      .option('--until <time>', 'keep observations observed before this RFC 3339 time')
      .option('--where <property=value>', 'keep observations whose property equals value (repeatable)', collect)
      .option('--lon-column <name>', 'CSV longitude column (default: found by common names)')
      .option('--lat-column <name>', 'CSV latitude column (default: found by common names)')
      .option('--time-column <name>', 'property (CSV column) holding each observation\'s time (default: observed_at)')
      .option('--time-format <pattern>', 'how that time is written, with YYYY, MM, DD, hh, mm, ss, e.g. DD.MM.YYYY (default: RFC 3339)')
      .option('--progress', 'report progress on stderr even when it is not a terminal');

  common(
    program
      .command('cluster')
      .description('cluster observations and write hotspots.geojson, centres.geojson, noise.geojson, points.geojson and summary.json')
      .argument('<input>', 'GeoJSON FeatureCollection, CSV with longitude/latitude columns, GeoJSON text sequence, or - for stdin'),
  )
    .requiredOption('--eps <metres>', 'neighbourhood radius in metres (inclusive), or auto for the k-distance knee')
    .requiredOption('--out-dir <dir>', 'result folder (replaced atomically)')
    .addOption(new Option('--method <method>', 'clustering method').choices(['dbscan', 'optics']).default('dbscan'))
    .addOption(new Option('--hull <kind>', 'hull shape').choices(['convex', 'concave']).default('convex'))
    .option('--concavity <n>', 'concave hull tightness (smaller is tighter)')
    .option('--count-by <property>', 'count the values of this property per hotspot')
    .option('--optics-max-eps <metres>', 'OPTICS: largest radius searched (default 3 × eps)')
    .addOption(new Option('--optics-extraction <how>', 'OPTICS: cut hotspots at eps or by the ξ method').choices(['eps', 'xi']))
    .option('--xi <x>', 'OPTICS ξ: relative reachability drop bounding a hotspot (default 0.05)')
    .option('--min-cluster-size <n>', 'OPTICS ξ: fewest observations in a hotspot (default: larger of min-points and 0.5 % of observations)')
    .option('--reference <property>', 'score hotspots against the known groups in this property (purity, adjusted Rand index, NMI) and give each its majority value')
    .option('--validation', 'add the silhouette and DBCV of the result to the summary (on a seeded sample of 2000 observations above that many)')
    .option('--simulations <n>', 'Monte Carlo test: simulations under the null model, giving each hotspot a p_value (99 when --null is given alone)')
    .option('--seed <n>', 'seed of the simulations and resamples: the same seed gives the same p-values and stabilities (default 1)')
    .addOption(new Option('--null <model>', 'null model of the test: csr (uniform in the study area) or effort (random labelling over cases and effort points)').choices(['csr', 'effort']))
    .option('--effort <file>', 'effort null model: a file of points where observers looked (GeoJSON, CSV or text sequence)')
    .option('--effort-where <property=value>', 'effort null model: the observations with this property value are effort points, the others cases')
    .option('--study-area <file>', 'csr null model: a GeoJSON Polygon or MultiPolygon to place points in (default: convex hull of the observations)')
    .option('--significance-level <x>', 'hotspots with p_value at most this are marked significant (default 0.05)')
    .option('--resamples <n>', 'stability: resamples of the observations, giving each hotspot a stability (mean Jaccard with its best match)')
    .option('--resample-share <x>', 'stability: share of the observations each resample keeps (default 0.8)')
    .option('--threads <n>', 'worker threads for simulations and resamples (default: the machine\'s parallelism); results do not depend on it')
    .option('--report', 'also write report.html: the map, figures, k-distance or reachability plot, warnings and cautions in one file that opens with no network')
    .option('--generalise-m <metres>', 'write published layers instead: positions on a grid of this many metres, outlines from grid cells (see the README\'s Security section)')
    .option('--min-count <n>', 'published layers: withhold hotspots of fewer observations (default 1)')
    .option('--withhold-noise', 'published layers: leave noise out')
    .option('--publish-properties <names>', 'published layers: comma-separated observation properties that may appear (default: none)')
    .addHelpText(
      'after',
      `
Examples:
  roost cluster sightings.geojson --eps 250 --min-points 5 --out-dir result
  roost cluster counts.csv --eps 300 --weight birds --since 2026-05-01T00:00:00Z --out-dir may
  roost cluster nests.geojson --eps 250 --null csr --simulations 99 --seed 7 --resamples 50 --out-dir tested
  roost cluster cases.geojson --eps 400 --null effort --effort visits.geojson --out-dir tested
  roost cluster cases.geojson --eps 500 --min-points 5 --generalise-m 500 --min-count 10 --withhold-noise --out-dir public
  cat sightings.geojson | roost cluster - --eps auto --hull concave --count-by species --out-dir result
  roost cluster nests.geojson --eps 200 --validation --reference colony --out-dir scored

Results are patterns, not causes; hotspots can mirror where observers went. See the README.`,
    )
    .action(async (input: string, opts: Record<string, unknown>) => {
      try {
        const settings = resolveSettings(settingsFromFlags(opts));
        const trust = trustFromFlags(opts);
        const threads = opts.threads === undefined ? defaultThreads() : Number(opts.threads);
        if (!Number.isInteger(threads) || threads < 1 || threads > 256) throw new SettingsError('threads', `--threads must be a whole number from 1 to 256, got ${JSON.stringify(opts.threads)}`);
        if (opts.effort !== undefined && trust.effortWhere !== null) throw new SettingsError('effort', 'give effort points either as a file (--effort) or by a marker (--effort-where), not both');
        if (opts.effort !== undefined && trust.nullModel !== 'effort') throw new SettingsError('effort', '--effort gives effort points, which only the effort null model uses; add --null effort');
        if (opts.studyArea !== undefined && (trust.simulations === 0 || trust.nullModel !== 'csr')) throw new SettingsError('study_area', '--study-area is where the csr null model places points; add --null csr');
        const publish = publishFromFlags(opts, settings.countBy);
        if (publish !== null && opts.report) throw new PublishError('generalise_m', '--report shows exact positions and cannot be combined with --generalise-m; write the report from an unpublished result');
        const studyArea: StudyArea | null = opts.studyArea === undefined ? null : readStudyArea((await readInput(String(opts.studyArea))).toString('utf8'));
        const fileEffort = opts.effort === undefined ? null : await effortFromFile(String(opts.effort), settings);
        // a named file is read in windows, never held whole (src/ingest/source.ts)
        const data = input === '-' ? await readInput(input) : new InputFile(input);
        const trials = trust.simulations > 0 || trust.resamples > 0;
        const size = data instanceof InputFile ? data.size : data.length;
        const showProgress = Boolean(opts.progress) || (process.stderr.isTTY && (size > 5_000_000 || trials));
        const onProgress = progressReporter(showProgress);
        // the points and noise layers are written in a worker thread beside the figures when that pays (./layer-thread.ts)
        const layerThread = publish === null && data instanceof InputFile ? PointLayerThread.start(input, data.size) : null;
        // the result folder is opened early when the worker writes into it; removed again on any failure
        let out = layerThread === null ? null : await ResultFolder.open(String(opts.outDir));
        const early = out;
        const onPointLayers = layerThread === null || early === null ? undefined : (job: PointLayersJob) => layerThread.offer(job, early.path('noise.geojson'), early.path('points.geojson'));
        const t0 = performance.now();
        let result: ClusterResult;
        try {
          const clustered = clusterCases(data, formatFromPath(input, opts.format as string | undefined), settings, trust, { onProgress, onPointLayers });
          result = clustered.result;
          if (trials) await assess(result, settings, { settings: trust, studyArea, effort: fileEffort ?? clustered.effort, threads, onProgress: trialReporter(showProgress) });
          onProgress('write', 0);
          const tWrite = performance.now();
          const timings = result.summary.timings_ms as Record<string, number>;
          /** the write stage so far added to the clustering's own, and the total; called as summary.json is written, last */
          const stampTimings = (): void => {
            timings.write = Math.round(((timings.write ?? 0) + performance.now() - tWrite) * 10) / 10;
            timings.total = Math.round((performance.now() - t0) * 10) / 10;
          };
          if (publish !== null) {
            const text = (name: 'points' | 'hotspots'): string => [...result.layers[name].chunks()].join('');
            const layers = publishLayerTexts(text('points'), text('hotspots'), publish);
            await writeResultFolder(String(opts.outDir), [
              ...LAYER_NAMES.map((name) => [`${name}.geojson`, [layers[name]]] as [string, Iterable<string>]),
              [
                'summary.json',
                () => {
                  stampTimings();
                  return JSON.stringify(publishedSummary(result.summary, layers), null, 2) + '\n';
                },
              ],
            ]);
            const w = layers.info;
            process.stderr.write(
              `roost: published ${w.hotspots.published} hotspot(s) and ${w.observations.published} generalised point(s) on a ${w.generalise_m} m grid; withheld ${w.hotspots.withheld} small hotspot(s) (${w.observations.withheld_in_small_hotspots} observations) and ${w.observations.withheld_noise} noise → ${String(opts.outDir)}\n`,
            );
            setExit(EXIT.ok);
            return;
          }
          const report = opts.report ? await reportFile(result, input) : [];
          out ??= await ResultFolder.open(String(opts.outDir));
          const byThread = new Set<LayerName>();
          for (const name of LAYER_NAMES) {
            // hotspots and centres are written here while the worker writes the other two
            if (name === 'noise' && layerThread !== null && (await layerThread.done())) byThread.add('noise').add('points');
            if (!byThread.has(name)) out.write(`${name}.geojson`, result.layers[name].byteChunks());
          }
          for (const [name, content] of report) out.write(name, content);
          // summary.json is written last so that its write stage includes the other files.
          out.write('summary.json', () => {
            stampTimings();
            return JSON.stringify(result.summary, null, 2) + '\n';
          });
          await out.commit();
        } catch (err) {
          await layerThread?.stop();
          await out?.discard();
          throw err;
        }
        const f = result.summary.figures as { hotspots: number; clustered: number; noise: number };
        process.stderr.write(`roost: ${f.hotspots} hotspot(s), ${f.clustered} clustered, ${f.noise} noise → ${String(opts.outDir)}\n`);
        setExit(EXIT.ok);
      } catch (err) {
        setExit(fail(err));
      }
    });

  common(
    program
      .command('suggest-eps')
      .description('print the k-distance curve (k = min-points − 1) and its knee, a suggested eps in metres')
      .argument('<input>', 'GeoJSON, CSV or GeoJSON text sequence file, or - for stdin'),
  )
    .option('--json', 'print the whole answer as JSON')
    .action(async (input: string, opts: Record<string, unknown>) => {
      try {
        const settings = resolveSettings({ ...settingsFromFlags(opts), eps: 'auto' });
        const data = await readInput(input);
        const answer = suggestEpsInput(data, formatFromPath(input, opts.format as string | undefined), settings);
        if (opts.json) {
          process.stdout.write(JSON.stringify(answer, null, 2) + '\n');
        } else {
          const curve = answer.curve as { rank: number[]; meters: number[] };
          process.stdout.write(
            `k-distance curve, k = ${String(answer.k)} (min-points ${String(answer.min_points)}), ${String(answer.sampled)} of ${String(answer.observations)} observations\n`,
          );
          // the message says it all when there is no knee (it starts "No knee found"); else it explains the number
          process.stdout.write(answer.eps_m === null ? `${String(answer.message)}\n` : `suggested eps: ${String(answer.eps_m)} m (${String(answer.message)})\n`);
          const warnings = (answer.warnings as { message: string }[] | undefined) ?? [];
          for (const w of warnings) process.stdout.write(`warning: ${w.message}\n`);
          const lines = ['rank\tmetres'];
          for (let i = 0; i < curve.rank.length; i++) lines.push(`${curve.rank[i]}\t${curve.meters[i]}`);
          process.stdout.write(lines.join('\n') + '\n');
        }
        setExit(EXIT.ok);
      } catch (err) {
        setExit(fail(err));
      }
    });

  program
    .command('sweep')
    .description('cluster at every eps × min_points pair (DBSCAN) and print hotspots, noise share and the adjusted Rand index between neighbouring settings')
    .argument('<input>', 'GeoJSON, CSV or GeoJSON text sequence file, or - for stdin')
    .requiredOption('--eps <list>', 'eps values in metres: a list (100,150,250) or a range start:stop:step (100:300:50)')
    .requiredOption('--min-points <list>', 'min_points values: a list (3,5,10) or a range (3:12:3)')
    .addOption(new Option('--format <format>', 'input format (default: from the file name, else sniffed)').choices(['geojson', 'csv', 'geojson-seq']))
    .option('--weight <property>', 'numeric property holding each observation\'s weight (e.g. animals seen)')
    .option('--since <time>', 'keep observations observed at or after this RFC 3339 time')
    .option('--until <time>', 'keep observations observed before this RFC 3339 time')
    .option('--where <property=value>', 'keep observations whose property equals value (repeatable)', collect)
    .option('--lon-column <name>', 'CSV longitude column (default: found by common names)')
    .option('--lat-column <name>', 'CSV latitude column (default: found by common names)')
    .option('--time-column <name>', 'property (CSV column) holding each observation\'s time (default: observed_at)')
    .option('--time-format <pattern>', 'how that time is written, e.g. DD.MM.YYYY (default: RFC 3339)')
    .option('--json', 'print the whole answer as JSON')
    .option('--progress', 'report progress on stderr even when it is not a terminal')
    .addHelpText(
      'after',
      `
Examples:
  roost sweep sightings.geojson --eps 100:300:50 --min-points 3,5,10
  roost sweep counts.csv --eps 150,250,400 --min-points 5:20:5 --weight birds --json

At most 20 values per axis and 100 settings in all.`,
    )
    .action(async (input: string, opts: Record<string, unknown>) => {
      try {
        const grid = sweepGrid(opts.eps, opts.minPoints);
        const settings = resolveSettings({ ...settingsFromFlags({ ...opts, eps: undefined, minPoints: undefined }), eps: 'auto' });
        const data = await readInput(input);
        const total = grid.epsMeters.length * grid.minPoints.length;
        const show = Boolean(opts.progress) || process.stderr.isTTY;
        let last = 0;
        const answer = sweepInput(data, formatFromPath(input, opts.format as string | undefined), settings, grid, {
          onProgress: (done, all, at) => {
            const now = Date.now();
            if (!show || (done < all && now - last < 500)) return;
            last = now;
            process.stderr.write(`roost: sweep ${done}/${all} (eps ${at.epsMeters} m, min_points ${at.minPoints})\n`);
          },
        });
        if (opts.json) process.stdout.write(JSON.stringify(answer, null, 2) + '\n');
        else {
          process.stdout.write(`sweep: ${String(answer.observations)} observations, DBSCAN at ${total} settings; ari_next_eps and ari_next_min_points compare each setting with the next one along that axis (noise as one group)\n`);
          process.stdout.write(sweepTable(answer));
        }
        setExit(EXIT.ok);
      } catch (err) {
        setExit(fail(err));
      }
    });

  program.addCommand(serveCommand(setExit));
  program.addCommand(reclusterCommand(setExit));
  program.addCommand(keysCommand(setExit));

  return program;
}

/** Runs the command line with `argv` (without node and script); resolves to the exit code. */
export async function run(argv: string[]): Promise<number> {
  let code: number = EXIT.ok;
  const program = buildProgram((c) => (code = c));
  try {
    await program.parseAsync(argv, { from: 'user' });
  } catch (err) {
    const e = err as { code?: string; exitCode?: number };
    if (e.code === 'commander.helpDisplayed' || e.code === 'commander.version' || e.code === 'commander.help') return EXIT.ok;
    return e.exitCode === 0 ? EXIT.ok : EXIT.usage;
  }
  return code;
}
