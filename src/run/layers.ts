/**
 * The layers of a clustering result, in the order they are written: the one list the command
 * line (file names), the HTTP service (`?layer=`, `/runs/{run}/{layer}`) and the store (stored
 * pieces) share.
 */
export const LAYER_NAMES = ['hotspots', 'centres', 'noise', 'points'] as const;
export type LayerName = (typeof LAYER_NAMES)[number];

/** Whether `name` is one of the layer names. */
export function isLayerName(name: unknown): name is LayerName {
  return typeof name === 'string' && (LAYER_NAMES as readonly string[]).includes(name);
}
