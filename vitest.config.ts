import { availableParallelism } from "node:os";
import { defineConfig } from "vitest/config";

export default defineConfig({
  test: {
    include: ["test/**/*.test.ts"],
    setupFiles: ["test/helpers/fast-check-seed.ts"],
    // vitest's default (one worker fewer than the cores) runs the suite in a single worker on a 2-core machine, where
    // the main process mostly waits: one worker per core (at least two) ran the suite in ~0.6× the wall time there (Dec 2026)
    maxWorkers: Math.max(2, availableParallelism()),
    testTimeout: 60_000,
    hookTimeout: 120_000,
    env: { FORCE_COLOR: "0", NO_COLOR: "1" },
    // the built library is loaded by Node itself, not rewritten by vitest's module runner (bench/built.ts says why)
    server: { deps: { external: [/\/node_modules\//, /\/dist\//] } },
  },
  bench: {
    include: ["bench/**/*.bench.ts"],
  },
});
