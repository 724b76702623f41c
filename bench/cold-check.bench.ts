import { spawnSync } from "node:child_process";
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { isDeepStrictEqual } from "node:util";
import { afterAll, bench, describe } from "vitest";
import { parseSpec } from "../src/spec/index.js";
import { mlpSpec, mlpYaml } from "./generated-specs.js";

// `headroom check` as a user runs it: a fresh process per spec (Node's start-up, loading the built CLI, reading the
// file, the check in code V8 has not compiled yet, the report). check.bench.ts measures the core call in a warm
// process, where the same spec runs in a small fraction of the time; here most of the first call runs in V8's
// interpreter and baseline tier. Baseline in the same run: `headroom --version`, a fresh process that loads the CLI
// and exits. Milliseconds per run: read the "mean" column; the check rows minus the baseline are the user's wait.
const dir = mkdtempSync(join(tmpdir(), "headroom-cold-"));
const mlpFile = join(dir, "mlp-1000.yaml");
writeFileSync(mlpFile, mlpYaml());
afterAll(() => rmSync(dir, { recursive: true, force: true }));

// the file must describe the spec check.bench.ts times, or the two benches would measure different networks
const parsed = parseSpec(mlpYaml(), mlpFile);
if (!parsed.ok || !isDeepStrictEqual({ ...parsed.spec, source: "" }, { ...mlpSpec(), source: "" })) {
  throw new Error("mlpYaml() does not read back as mlpSpec()");
}

function run(args: string[], expected: readonly number[]): void {
  const child = spawnSync(process.execPath, ["bin/headroom.js", ...args], { encoding: "utf8", maxBuffer: 1 << 26 });
  if (child.status === null || !expected.includes(child.status)) {
    throw new Error(`headroom ${args.join(" ")}: exit ${String(child.status)}\n${child.stderr}`);
  }
}

describe("headroom in a fresh process (needs npm run build)", () => {
  bench("headroom --version (baseline: start-up and loading the CLI)", () => run(["--version"], [0]), { iterations: 5, time: 0 });
  // exit 1: the verdict of the generated spec is "fails"
  bench("headroom check, 1,000-layer spec", () => run(["check", mlpFile], [1]), { iterations: 3, time: 0 });
  bench("headroom check specs/transformer-encoder.yaml", () => run(["check", "specs/transformer-encoder.yaml"], [0, 1]), { iterations: 5, time: 0 });
});
