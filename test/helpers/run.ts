import { spawnSync } from "node:child_process";
import { fileURLToPath } from "node:url";

/** The project's root folder. */
export const ROOT = fileURLToPath(new URL("../../", import.meta.url));

/** The built executable (tests run after `npm run build`). */
export const BIN = fileURLToPath(new URL("../../bin/headroom.js", import.meta.url));

export interface CliRun {
  status: number | null;
  stdout: string;
  stderr: string;
}

/** Spawn the built binary with arguments and optional stdin; colour off, as in CI. */
export function runCli(args: readonly string[], options: { input?: string; cwd?: string } = {}): CliRun {
  const result = spawnSync(process.execPath, [BIN, ...args], {
    cwd: options.cwd ?? ROOT,
    input: options.input ?? "",
    encoding: "utf8",
    env: { ...process.env, FORCE_COLOR: "0", NO_COLOR: "1" },
    maxBuffer: 256 * 1024 * 1024,
  });
  return { status: result.status, stdout: result.stdout, stderr: result.stderr };
}
