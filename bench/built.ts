/**
 * The built library, as a user's program runs it: a module of dist/ (`npm run build`; `npm run bench` builds first)
 * loaded by Node itself. vitest.config.ts leaves dist/ to Node: vitest's own module runner rewrites every import of
 * the code it loads into a property read on a module object, and the 1,000-layer check ran 1.5–2.5× slower from src/
 * through it than the same code from dist/ in plain Node (Dec 2026, the same minutes). The types are those of the same
 * module in src/, which tsc checks without a build.
 */
import { existsSync } from "node:fs";
import { fileURLToPath } from "node:url";

export async function built<T>(path: string): Promise<T> {
  const url = new URL(`../dist/${path}`, import.meta.url);
  if (!existsSync(fileURLToPath(url))) {
    throw new Error(`dist/${path} is missing: run \`npm run build\` first (\`npm run bench\` does)`);
  }
  return (await import(url.href)) as T;
}
