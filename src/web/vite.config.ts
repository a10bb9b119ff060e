/**
 * Builds the map page (index.html and its scripts) into dist/web, served by the service at `/`.
 * `vite build -c src/web/vite.config.ts`; the self-contained report script has its own build
 * (vite.report.config.ts).
 */
import { fileURLToPath } from 'node:url';
import { defineConfig } from 'vite';

const here = fileURLToPath(new URL('.', import.meta.url));

export default defineConfig({
  root: here,
  base: '/',
  publicDir: false,
  logLevel: 'warn',
  build: {
    outDir: fileURLToPath(new URL('../../dist/web', import.meta.url)),
    emptyOutDir: true,
    chunkSizeWarningLimit: 2500,
    assetsInlineLimit: 0,
  },
});
