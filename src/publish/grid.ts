/**
 * The generalisation grid: cells of about `sizeMeters` on the ground, fixed for the whole Earth
 * (it depends on the size only, never on the data), so a published position tells which cell an
 * observation is in and nothing about where in the cell.
 *
 * Rows are bands of latitude exactly `sizeMeters` high, counted from the south pole. A row is cut
 * into the fewest equal columns whose width at the row's edge nearer the equator (its widest
 * edge) is at most `sizeMeters`, so every cell is at most `sizeMeters` wide and high; columns
 * start at −180°, so no cell straddles the antimeridian. The two rows that touch a pole are one
 * cell each, centred on the pole.
 *
 * What follows (on the sphere of radius 6 371 008.8 m): every position is at most
 * `sizeMeters`·√2/2 from its cell's centre (a corner of the widest edge is the farthest point),
 * and at most `sizeMeters` in a polar cell. `maxOffsetMeters` is the bound for all cells.
 */
import { EARTH_RADIUS_M } from '../core/haversine.js';

const DEG = 180 / Math.PI;

/** A cell: its row and column and its centre in degrees. */
export interface Cell {
  row: number;
  col: number;
  lon: number;
  lat: number;
}

export class Grid {
  readonly sizeMeters: number;
  /** row height in degrees of latitude */
  private readonly dLat: number;
  private readonly rows: number;

  constructor(sizeMeters: number) {
    if (!(sizeMeters >= 1 && sizeMeters <= 100_000)) throw new RangeError(`generalise_m must be from 1 to 100000 metres, got ${String(sizeMeters)}`);
    this.sizeMeters = sizeMeters;
    this.dLat = (sizeMeters / EARTH_RADIUS_M) * DEG;
    this.rows = Math.ceil(180 / this.dLat);
  }

  /** The farthest any position lies from its cell's centre, in metres (polar cells). */
  get maxOffsetMeters(): number {
    return this.sizeMeters;
  }

  /** Columns in a row. */
  columns(row: number): number {
    if (row <= 0 || row >= this.rows - 1) return 1;
    const lower = -90 + row * this.dLat;
    const upper = Math.min(90, lower + this.dLat);
    const widest = Math.min(Math.abs(lower), Math.abs(upper)) / DEG;
    // lower < 0 < upper: the equator runs through the row, which is widest there
    const edge = lower < 0 && upper > 0 ? 0 : widest;
    return Math.max(1, Math.ceil((2 * Math.PI * EARTH_RADIUS_M * Math.cos(edge)) / this.sizeMeters));
  }

  /** The cell holding (lon, lat) in degrees. */
  cellOf(lon: number, lat: number): Cell {
    const row = Math.min(this.rows - 1, Math.max(0, Math.floor((lat + 90) / this.dLat)));
    if (row === 0) return { row, col: 0, lon: 0, lat: -90 };
    if (row === this.rows - 1) return { row, col: 0, lon: 0, lat: 90 };
    const n = this.columns(row);
    const width = 360 / n;
    let col = Math.floor((lon + 180) / width);
    if (col >= n) col -= n; // lon = 180 is the same meridian as −180
    if (col < 0) col = 0;
    const lower = -90 + row * this.dLat;
    return { row, col, lon: -180 + (col + 0.5) * width, lat: lower + this.dLat / 2 };
  }
}
