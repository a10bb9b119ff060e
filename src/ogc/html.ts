/**
 * The HTML representation of the OGC API – Features resources (OGC 17-069r4 §7.12 and the HTML
 * conformance class): plain, readable pages with the same content and links as the JSON, no
 * scripts and nothing from other hosts.
 */

export interface Link {
  href: string;
  rel: string;
  type?: string;
  title?: string;
}

/** Text made safe inside HTML elements and attributes. */
export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c]!);
}

function linkList(links: readonly Link[]): string {
  if (links.length === 0) return '';
  return (
    '<h2>Links</h2><ul>' +
    links.map((l) => `<li><a href="${escapeHtml(l.href)}">${escapeHtml(l.title ?? l.rel)}</a> <small>(${escapeHtml(l.rel)}${l.type ? ', ' + escapeHtml(l.type) : ''})</small></li>`).join('') +
    '</ul>'
  );
}

function valueHtml(v: unknown): string {
  if (v === null || v === undefined) return '<i>null</i>';
  if (typeof v === 'object') return `<code>${escapeHtml(JSON.stringify(v))}</code>`;
  return escapeHtml(String(v));
}

/** A table of a record's members. */
export function table(record: Record<string, unknown>): string {
  const rows = Object.entries(record).map(([k, v]) => `<tr><th>${escapeHtml(k)}</th><td>${valueHtml(v)}</td></tr>`);
  return `<table>${rows.join('')}</table>`;
}

/** A whole page: title, body sections, links. */
export function page(title: string, sections: string[], links: readonly Link[]): string {
  return (
    '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">' +
    `<title>${escapeHtml(title)}</title>` +
    '<style>body{font:15px/1.45 system-ui,sans-serif;max-width:60rem;margin:1rem auto;padding:0 1rem;color:#1b1b1b}' +
    'table{border-collapse:collapse;margin:.5rem 0}th,td{border:1px solid #ccc;padding:.2rem .5rem;text-align:left;vertical-align:top}' +
    'th{background:#f2f2f2}code{font-size:13px}section{border-top:1px solid #ddd;margin-top:1rem}</style></head><body>' +
    `<h1>${escapeHtml(title)}</h1>` +
    sections.join('') +
    linkList(links) +
    '</body></html>'
  );
}
