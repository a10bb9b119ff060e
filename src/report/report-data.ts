/**
 * The data a report.html carries, inlined as JSON: written by the service and the command line
 * (report.ts), read by the report's script in the browser (src/web/report.ts). Types only, so the
 * browser bundle takes nothing from here but the shape. The layers and the k-distance answer are
 * parsed JSON to the writer; the script names the shapes it reads them as.
 */
export interface ReportData<Layer = unknown, KDistance = Record<string, unknown>> {
  title: string;
  dataset: { id: string; name: string } | null;
  run: { id: string; created_at: string; finished_at: string | null } | null;
  roost_version: string;
  generated_at: string;
  summary: Record<string, unknown>;
  hotspots: Layer;
  centres: Layer;
  noise: Layer;
  /** noise points left out of the map to keep the file small (0 when all are drawn) */
  noise_left_out: number;
  /** the k-distance answer at the run's min_points (DBSCAN runs) */
  kdistance: KDistance | null;
  /** OPTICS runs: [order, reachability_m or null, hotspot_id or null] per observation in OPTICS order */
  reachability: [number, number | null, number | null][] | null;
}
