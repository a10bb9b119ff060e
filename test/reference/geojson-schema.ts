/**
 * The GeoJSON FeatureCollection JSON Schema as a validator.
 * source: geojson-schema package (GeoJSON JSON Schemas, https://geojson.org/schema/FeatureCollection.json)
 */
import { createRequire } from 'node:module';
import { Ajv } from 'ajv';

const schema = createRequire(import.meta.url)('geojson-schema/FeatureCollection.json') as object;

/** Validates one parsed document; `validateCollection.errors` says why not. */
export const validateCollection = new Ajv({ allErrors: true, strict: false }).compile(schema);
