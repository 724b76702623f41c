/** Helpers that several commands share, kept apart from the commands so that each loads only what it runs. */
import { randomBytes } from "node:crypto";
import { renameSync, rmSync, statSync, writeFileSync } from "node:fs";
import { dirname, basename, join } from "node:path";
import { parseVaryOption, variantsOf, VaryError, type Variant } from "../batch/vary.js";
import { OutputError, systemProblem, UserError } from "./errors.js";

/** Read all of stdin as text. */
export async function readStdin(): Promise<string> {
  const chunks: Buffer[] = [];
  for await (const chunk of process.stdin) chunks.push(chunk as Buffer);
  return Buffer.concat(chunks).toString("utf8");
}

/** Parse every --vary option into the list of variants (empty without options); bad options are input errors. */
export function variantsFromOptions(options: readonly string[] | undefined): Variant[] {
  try {
    return variantsOf((options ?? []).map(parseVaryOption));
  } catch (error) {
    if (error instanceof VaryError) throw new UserError(error.message);
    throw error;
  }
}

/** Write text to stdout and wait until it is handed over (large outputs, pipes); rejects with an OutputError. */
export function writeOut(text: string): Promise<void> {
  return new Promise((resolve, reject) => {
    process.stdout.write(text, (error) => (error ? reject(new OutputError(error)) : resolve()));
  });
}

/**
 * Write a file whole or not at all: into a temporary file beside it, then renamed over the target
 * (a rename within one folder is atomic on POSIX file systems).
 */
export function writeFileAtomic(path: string, text: string): void {
  const temporary = join(dirname(path), `.${basename(path)}.${randomBytes(6).toString("hex")}.tmp`);
  try {
    writeFileSync(temporary, text, { flag: "wx" });
    renameSync(temporary, path);
  } catch (error) {
    rmSync(temporary, { force: true });
    const code = (error as { code?: unknown }).code;
    if (typeof code === "string") throw new UserError(`${path}: cannot write the report: ${writeProblem(path, code)}`);
    throw error;
  }
}

/** Why a file could not be written, in words a user can act on (the system's code only when it is none of these). */
function writeProblem(path: string, code: string): string {
  if (isFolder(path)) return "it is a folder; give a file name, such as report.html";
  if (code === "ENOENT" || code === "ENOTDIR") return `the folder ${dirname(path)} does not exist`;
  return systemProblem(code);
}

function isFolder(path: string): boolean {
  try {
    return statSync(path).isDirectory();
  } catch {
    return false;
  }
}
