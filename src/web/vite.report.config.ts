/**
 * Builds the report script: one classic script with its styles beside it, everything it needs
 * (MapLibre and its worker, the background land, the charts) inside, so that the report writer
 * can inline both into one report.html that fetches nothing.
 */
import { fileURLToPath } from 'node:url';
import { defineConfig } from 'vite';

export default defineConfig({
  root: fileURLToPath(new URL('.', import.meta.url)),
  publicDir: false,
  logLevel: 'warn',
  build: {
    outDir: fileURLToPath(new URL('../../dist/web-report', import.meta.url)),
    emptyOutDir: true,
    chunkSizeWarningLimit: 4000,
    // MapLibre's import.meta.url only locates its worker file, which the report replaces by an inlined blob
    rolldownOptions: { transform: { define: { 'import.meta': '{}' } } },
    lib: {
      entry: fileURLToPath(new URL('./report.ts', import.meta.url)),
      name: 'RoostReport',
      formats: ['iife'],
      fileName: () => 'report.js',
      cssFileName: 'report',
    },
  },
});
