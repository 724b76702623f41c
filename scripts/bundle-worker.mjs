// Bundles the built batch worker (dist/batch/worker.js and the ~100 modules it imports) into that one file,
// in place; `npm run build` runs it after tsc. Every worker thread loads its own copy of the modules, and
// Node's loader pays per file (resolve, read, compile, link): one file starts a worker ~50 ms sooner
// (DEVELOPERS.md "Batch pool and V8 tiering"). The code is tsc's output, only joined: a build by tsc
// alone leaves the plain worker, which behaves the same. test/batch/bundle.test.ts runs a bundle.
import { fileURLToPath } from "node:url";
import { readdirSync, rmSync } from "node:fs";
import { dirname, join } from "node:path";
import { build } from "vite";

const ROOT = fileURLToPath(new URL("..", import.meta.url));

// one vite build of tsc's output: Node built-ins and the packages stay imports, nothing minified, source maps kept
async function bundle(entry, outDir, output) {
  await build({
    configFile: false,
    root: ROOT,
    logLevel: "warn",
    publicDir: false,
    build: {
      ssr: entry,
      outDir,
      emptyOutDir: false,
      copyPublicDir: false,
      minify: false,
      sourcemap: true,
      target: "node20",
      rolldownOptions: { output: { format: "es", ...output } },
    },
  });
}

/**
 * Bundle `entry` (default: dist/batch/worker.js) into `outFile` (default: the entry itself). Node
 * built-ins stay imports; the yaml and zod packages are loaded on demand by createRequire, so
 * `outFile` should sit inside the project for them to resolve.
 */
export async function bundleWorker(entry = `${ROOT}dist/batch/worker.js`, outFile = entry) {
  await bundle(entry, dirname(outFile), { entryFileNames: outFile.slice(dirname(outFile).length + 1) });
}

/**
 * Bundle the command line (dist/cli/main.js, in place) the same way: the commands it loads on demand become chunks
 * beside it in dist/cli/ (bundle-*.js, the old ones removed first), so that what a module reads relative to itself
 * (src/cli/report.ts's ../../package.json, src/cli/batch.ts's ../batch/worker.js) stays where it was. A user's
 * `headroom check` on an example loaded ~100 modules one by one; as one file and a few chunks it ran ~90 ms sooner
 * (DEVELOPERS.md, cold-check.bench.ts).
 */
export async function bundleCli(dir = `${ROOT}dist/cli`) {
  for (const name of readdirSync(dir)) if (name.startsWith("bundle-")) rmSync(join(dir, name));
  await bundle(join(dir, "main.js"), dir, { entryFileNames: "main.js", chunkFileNames: "bundle-[name]-[hash].js" });
}

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  await bundleWorker();
  await bundleCli();
}
