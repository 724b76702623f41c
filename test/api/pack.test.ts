import { execFileSync, spawnSync } from "node:child_process";
import { createHash } from "node:crypto";
import { cpSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { ROOT } from "../helpers/run.js";
import { check } from "../../src/check.js";
import { loadSpec } from "../../src/spec/index.js";

// The package as users get it: `npm pack` (after the build), installed by name into a fresh project,
// then the README's script example (examples/at-risk.mjs) run against it. The fresh project's lockfile
// pins the tarball and, for its dependencies, this project's own lockfile entries (the versions, addresses
// and checksums `npm ci` installed here), so `npm ci --offline` installs from the tarballs that install left
// in npm's cache: no network, and no registry listings, which `npm ci` does not fetch (a lockfile-less
// `npm install --offline` needs them and failed on a machine whose cache only `npm ci` had filled).
let dir: string;
let project: string;

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "headroom-pack-"));
  execFileSync("npm", ["pack", "--ignore-scripts", "--pack-destination", dir], { cwd: ROOT, stdio: "pipe" });
  const tarball = readdirSync(dir).find((name) => name.endsWith(".tgz"))!;
  project = join(dir, "project");
  cpSync(join(ROOT, "examples"), join(project, "examples"), { recursive: true });
  const dependency = `file:../${tarball}`;
  writeFileSync(join(project, "package.json"), JSON.stringify({ name: "pack-check", private: true, type: "module", dependencies: { headroom: dependency } }));
  writeFileSync(join(project, "package-lock.json"), JSON.stringify(packLockfile(join(dir, tarball), dependency)));
  execFileSync("npm", ["ci", "--offline", "--no-audit", "--no-fund", "--ignore-scripts", "--loglevel=error"], { cwd: project, stdio: "pipe" });
}, 240_000);
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** A lockfile (version 3) for a project that depends on the packed tarball alone. */
function packLockfile(tarballPath: string, dependency: string): object {
  const own = JSON.parse(readFileSync(join(ROOT, "package.json"), "utf8"));
  const lock = JSON.parse(readFileSync(join(ROOT, "package-lock.json"), "utf8")) as { packages: Record<string, { dev?: boolean; devOptional?: boolean }> };
  const packages: Record<string, object> = {
    "": { name: "pack-check", dependencies: { headroom: dependency } },
    "node_modules/headroom": {
      version: own.version,
      resolved: dependency,
      integrity: `sha512-${createHash("sha512").update(readFileSync(tarballPath)).digest("base64")}`,
      license: own.license,
      dependencies: own.dependencies,
      bin: own.bin,
      engines: own.engines,
    },
  };
  // the runtime dependencies (and theirs) as this project's `npm ci` installed them; development-only ones stay out
  for (const [path, entry] of Object.entries(lock.packages)) if (path !== "" && !entry.dev && !entry.devOptional) packages[path] = entry;
  return { name: "pack-check", lockfileVersion: 3, requires: true, packages };
}

describe("the packed package, installed by name", () => {
  test("the README's example prints exactly the specs at risk", async () => {
    const specs = join(project, "node_modules", "headroom", "specs");
    const run = spawnSync(process.execPath, ["examples/at-risk.mjs", specs], { cwd: project, encoding: "utf8" });
    expect(run.stderr).toBe("");
    // expected: the same check run from the source tree
    const names = readdirSync(join(ROOT, "specs")).filter((n) => n.endsWith(".yaml")).sort();
    const atRisk: string[] = [];
    for (const name of names) {
      const loaded = await loadSpec(join(ROOT, "specs", name));
      if (!loaded.ok) throw new Error(`${name} is not valid`);
      const result = check(loaded.spec);
      if (result.verdict !== "fits") atRisk.push(`${result.spec.name}: ${result.verdict}`);
    }
    const printed = run.stdout.split("\n").filter((line) => /^\S+: (at-risk|fails) \(/.test(line)).map((line) => line.replace(/ \(.*$/, ""));
    expect(printed).toEqual(atRisk);
    expect(run.stdout).toContain(`${atRisk.length} of ${names.length} specs at risk or failing; 0 invalid.`);
    expect(run.status).toBe(atRisk.length > 0 ? 1 : 0);
  });

  test("the README's example positions the problems of a network that cannot be built (file:line:column)", () => {
    const folder = join(project, "unbuildable");
    mkdirSync(folder);
    const fixture = join(ROOT, "test", "fixtures", "specs", "unbuildable", "batch-norm-one-pixel.yaml");
    cpSync(fixture, join(folder, "kiln.yaml"));
    const run = spawnSync(process.execPath, ["examples/at-risk.mjs", folder], { cwd: project, encoding: "utf8" });
    expect(run.stderr).toBe("");
    // expected: the command line's own positioned problems for the same file (one per line on stderr)
    const cli = spawnSync(process.execPath, [join(ROOT, "bin", "headroom.js"), "check", join(folder, "kiln.yaml")], { encoding: "utf8" });
    expect(cli.status).toBe(2);
    const problems = cli.stderr.trim().split("\n");
    expect(problems[0]).toMatch(/kiln\.yaml:\d+:\d+: blocks\.settle\[0\]: /);
    expect(run.stdout).toContain(`kiln.yaml: the network cannot be built: ${problems.join("; ")}\n`);
    expect(run.stdout).toContain("0 of 1 specs at risk or failing; 1 invalid.");
    expect(run.status).toBe(2);
  });

  test("the README shows examples/at-risk.mjs as it is", () => {
    const readme = readFileSync(join(ROOT, "README.md"), "utf8");
    const example = readFileSync(join(ROOT, "examples", "at-risk.mjs"), "utf8");
    expect(readme).toContain("```js\n" + example + "```\n");
  });

  test("exports and types resolve by the package name", () => {
    const installed = JSON.parse(readFileSync(join(project, "node_modules", "headroom", "package.json"), "utf8"));
    expect(installed.exports["."].types).toBe("./dist/index.d.ts");
    const probe = [
      'import { check, loadSpec, parseSpec, batchCheck, renderHtmlReport } from "headroom";',
      "console.log([check, loadSpec, parseSpec, batchCheck, renderHtmlReport].map((f) => typeof f).join(','));",
    ].join("\n");
    writeFileSync(join(project, "probe.mjs"), probe);
    const run = spawnSync(process.execPath, ["probe.mjs"], { cwd: project, encoding: "utf8" });
    expect(run.stderr).toBe("");
    expect(run.stdout.trim()).toBe("function,function,function,function,function");
    const dts = readFileSync(join(project, "node_modules", "headroom", "dist", "index.d.ts"), "utf8");
    expect(dts).toContain('export * from "./check.js"');
    const checkDts = readFileSync(join(project, "node_modules", "headroom", "dist", "check.d.ts"), "utf8");
    expect(checkDts).toMatch(/export declare function check\(spec: NetworkSpec\b[^)]*\): CheckAnswer;/);
  });

  test("a TypeScript consumer type-checks against the installed types (module resolution by name)", () => {
    const probe = [
      'import { check, parseSpec, batchCheck, type BatchRow, type CheckAnswer } from "headroom";',
      'const parsed = parseSpec("name: x", "x.yaml");',
      "if (parsed.ok) {",
      "  const result: CheckAnswer = check(parsed.spec);",
      '  const verdict: "fits" | "at-risk" | "fails" = result.verdict;',
      "  void verdict;",
      "} else {",
      "  const line: number = parsed.issues[0]!.line;",
      "  void line;",
      "}",
      'const rows: Promise<BatchRow[]> = batchCheck(["specs"], { workers: 1 });',
      "void rows;",
      "// @ts-expect-error a verdict is one of three words",
      'const wrong: CheckAnswer["verdict"] = "maybe";',
      "void wrong;",
      "",
    ].join("\n");
    writeFileSync(join(project, "probe.ts"), probe);
    const tsc = join(ROOT, "node_modules", ".bin", "tsc");
    const run = spawnSync(
      tsc,
      ["--noEmit", "--strict", "--noUncheckedIndexedAccess", "--skipLibCheck", "--target", "es2022", "--module", "nodenext", "--moduleResolution", "nodenext", "probe.ts"],
      { cwd: project, encoding: "utf8" },
    );
    expect(run.stdout + run.stderr).toBe("");
    expect(run.status).toBe(0);
  });

  test("the installed binary runs a batch by the package's bin name", () => {
    const bin = join(project, "node_modules", ".bin", "headroom");
    const specs = join(project, "node_modules", "headroom", "specs");
    const run = spawnSync(bin, ["batch", join(specs, "transformer-encoder.yaml"), "--jsonl"], { cwd: project, encoding: "utf8" });
    expect(run.stderr).toBe("");
    expect(JSON.parse(run.stdout.trim())).toMatchObject({ index: 0, status: "ok" });
  });
});
