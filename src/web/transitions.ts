/**
 * How a hotspot changed since the previous run, shown by a shape and a word (never colour alone).
 * The kinds are MONIC's (Spiliopoulou et al. 2006); the shapes and words are ours.
 */
export type TransitionKind = 'emergence' | 'survival' | 'split' | 'absorption' | 'disappearance';

export const TRANSITION_MARKS: Record<TransitionKind, { shape: string; word: string }> = {
  emergence: { shape: 'triangle', word: 'new since the previous run' },
  survival: { shape: 'circle', word: 'carried on' },
  split: { shape: 'bar', word: 'split from one earlier hotspot' },
  absorption: { shape: 'diamond', word: 'absorbed earlier hotspots' },
  disappearance: { shape: 'cross', word: 'gone since the previous run' },
};

const SIZE = 28;

/** Draws one mark as RGBA pixels for map.addImage (dark outline on a light fill, readable on any background). */
export function drawMark(shape: string): { width: number; height: number; data: Uint8ClampedArray } {
  const canvas = document.createElement('canvas');
  canvas.width = SIZE;
  canvas.height = SIZE;
  const g = canvas.getContext('2d')!;
  g.lineWidth = 3;
  g.strokeStyle = '#1b1b1b';
  g.fillStyle = '#ffffff';
  g.beginPath();
  const c = SIZE / 2;
  if (shape === 'triangle') {
    g.moveTo(c, 3);
    g.lineTo(SIZE - 3, SIZE - 4);
    g.lineTo(3, SIZE - 4);
    g.closePath();
  } else if (shape === 'diamond') {
    g.moveTo(c, 2);
    g.lineTo(SIZE - 2, c);
    g.lineTo(c, SIZE - 2);
    g.lineTo(2, c);
    g.closePath();
  } else if (shape === 'bar') {
    g.rect(4, c - 5, SIZE - 8, 10);
  } else if (shape === 'cross') {
    g.moveTo(5, 5);
    g.lineTo(SIZE - 5, SIZE - 5);
    g.moveTo(SIZE - 5, 5);
    g.lineTo(5, SIZE - 5);
    g.lineWidth = 5;
    g.stroke();
    return { width: SIZE, height: SIZE, data: g.getImageData(0, 0, SIZE, SIZE).data };
  } else {
    g.arc(c, c, 7, 0, Math.PI * 2);
  }
  g.fill();
  g.stroke();
  return { width: SIZE, height: SIZE, data: g.getImageData(0, 0, SIZE, SIZE).data };
}

/** A small inline SVG of the same mark, for the legend and the list of changes. */
export function markSvg(shape: string): string {
  const body: Record<string, string> = {
    triangle: '<polygon points="7,1 13,12 1,12"/>',
    diamond: '<polygon points="7,0 14,7 7,14 0,7"/>',
    bar: '<rect x="1" y="4" width="12" height="6"/>',
    cross: '<path d="M2 2 L12 12 M12 2 L2 12" stroke-width="3"/>',
    circle: '<circle cx="7" cy="7" r="5"/>',
  };
  return `<svg class="mark" width="14" height="14" viewBox="0 0 14 14" aria-hidden="true" fill="#fff" stroke="#1b1b1b" stroke-width="2">${body[shape] ?? body.circle}</svg>`;
}
