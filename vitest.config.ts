import { defineConfig } from "vitest/config";

export default defineConfig({
  test: {
    include: ["test/**/*.test.ts"],
    setupFiles: ["test/helpers/fast-check-seed.ts"],
    testTimeout: 60_000,
    hookTimeout: 120_000,
    env: { FORCE_COLOR: "0", NO_COLOR: "1" },
  },
  bench: {
    include: ["bench/**/*.bench.ts"],
  },
});
