/**
 * The cautions printed next to every result (summary.json, API responses, README). Kept in one
 * place so every output says the same thing.
 */
export const CAUTIONS: readonly string[] = Object.freeze([
  'Observation hotspots often mirror where observers went, not only where the subject is: compare with survey effort before reading a hotspot as abundance.',
  'Exact locations of sensitive species or of people can cause harm: generalise coordinates and withhold small hotspots before publishing.',
  'A hotspot is a pattern, not a cause. Decisions about people, land or animals follow local rules and licensed practice.',
]);
