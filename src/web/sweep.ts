/**
 * The sensitivity table on the map page: how many hotspots and how much noise DBSCAN finds at
 * settings around the dataset's own, from `GET /v1/datasets/{id}/sweep`. Rows are eps, columns
 * min_points; each cell says its figures in words and is shaded by hotspot count with the page's
 * own sequential palette, so the colour only repeats what the numbers say.
 */
import type { components } from '../http/openapi-types.js';
import { colourOf, shadeClasses } from './palette.js';
import { escapeHtml } from './runview.js';

/** The answer of the sweep routes, as the contract (openapi.yaml) declares it. */
export type Sweep = components['schemas']['Sweep'];
export type SweepSetting = Sweep['settings'][number];

const uniqueSorted = (xs: number[]): number[] => [...new Set(xs)].sort((a, b) => a - b);

/** The grid asked for: half, three quarters, the same, one and a half and twice the current values. */
export function sweepGrid(eps: number, minPoints: number): { eps: number[]; minPoints: number[] } {
  const factors = [0.5, 0.75, 1, 1.5, 2];
  return {
    eps: uniqueSorted(factors.map((f) => (f === 1 ? eps : Math.max(1, Math.round(eps * f))))),
    minPoints: uniqueSorted(factors.map((f) => Math.max(2, Math.round(minPoints * f)))),
  };
}

/** The noise share as the table writes it, e.g. `34.5 %`. */
export const noisePercent = (share: number): string => `${(100 * share).toFixed(1)} %`;

/** WCAG relative luminance of a `#rrggbb` colour. */
function luminance(hex: string): number {
  const c = [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16) / 255).map((v) => (v <= 0.03928 ? v / 12.92 : ((v + 0.055) / 1.055) ** 2.4));
  return 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2];
}

/** Near-black or white, whichever contrasts more with the background. */
export function textOn(background: string): string {
  const l = luminance(background);
  const dark = luminance('#1b1b1b');
  return (l + 0.05) / (dark + 0.05) >= 1.05 / (l + 0.05) ? '#1b1b1b' : '#ffffff';
}

const ariText = (v: number | null): string => (v === null ? 'none' : v.toFixed(2));

/** The table's HTML; the cell at `current` (the dataset's own setting) is outlined and says so. */
export function sweepTableHtml(sweep: Sweep, current: { eps: number; minPoints: number }): string {
  const classes = shadeClasses(sweep.settings.map((s) => s.hotspots));
  const at = new Map(sweep.settings.map((s) => [`${s.eps_m}|${s.min_points}`, s]));
  const head = `<thead><tr><th scope="col">eps \\ min_points</th>${sweep.min_points.map((m) => `<th scope="col">${m}</th>`).join('')}</tr></thead>`;
  const rows = sweep.eps_m.map((e) => {
    const cells = sweep.min_points.map((m) => {
      const s = at.get(`${e}|${m}`);
      if (!s) return '<td>–</td>';
      const bg = colourOf(s.hotspots, classes);
      const isCurrent = Math.abs(e - current.eps) < 1e-9 && m === current.minPoints;
      const title = `eps ${e} m, min_points ${m}: ${s.hotspots} hotspot(s), ${s.noise} of ${sweep.observations} noise; ARI with the next eps ${ariText(s.ari_next_eps)}, with the next min_points ${ariText(s.ari_next_min_points)}`;
      return `<td class="sweep-cell${isCurrent ? ' current' : ''}" style="background:${bg};color:${textOn(bg)}" data-eps="${e}" data-min-points="${m}" title="${escapeHtml(title)}"${isCurrent ? ' aria-current="true"' : ''}>` +
        `<span class="hs" data-field="hotspots">${s.hotspots}</span> <span class="ns" data-field="noise_share">${noisePercent(s.noise_share)}</span>${isCurrent ? '<span class="now">now</span>' : ''}</td>`;
    });
    return `<tr><th scope="row">${e} m</th>${cells.join('')}</tr>`;
  });
  const legend = classes.map((c) => `<li><span class="swatch" style="background:${c.colour}"></span>${c.min === c.max ? c.min : `${c.min}–${c.max}`} hotspots</li>`).join('');
  return `<table id="sweep-table"><caption>Hotspots and noise share for each eps (rows) and min_points (columns), over ${sweep.observations} observations; the outlined cell marked “now” is the dataset's setting.</caption>${head}<tbody>${rows.join('')}</tbody></table>` +
    `<ul class="sweep-legend" aria-label="Cell shading">${legend}</ul><p class="note">Each cell: hotspot count, then noise share. A cell's tooltip gives the adjusted Rand index with its neighbours (${escapeHtml(sweep.ari)}).</p>`;
}
