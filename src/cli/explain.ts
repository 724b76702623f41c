import { renderExplainText } from "../report/check-explain.js";
import { findTensor } from "../risk/index.js";
import { loadAndCheck, type JudgeFlags } from "./check.js";
import { UserError } from "./errors.js";
import { stdoutStyle, textWidth } from "./terminal.js";

/** `headroom explain SPEC TENSOR`: the ledger of one tensor, factor by factor, and its risk. */
export async function runExplain(path: string, words: string[], flags: JudgeFlags & { json?: boolean }): Promise<void> {
  const result = await loadAndCheck(path, flags, { ledger: true, everyFormat: true });
  if (result === undefined) return;
  const query = words.join(" ");
  const found = findTensor(result.tensors, query);
  if (!found.ok) {
    const list = found.candidates.join(", ");
    throw new UserError(
      found.reason === "ambiguous"
        ? `"${query}" names ${found.total} tensors of ${path}; give one id${found.total > found.candidates.length ? `, such as` : ""}: ${list}` +
          (found.total > found.candidates.length ? ` (and ${found.total - found.candidates.length} more)` : "")
        : `no tensor "${query}" in ${path}; nearest ids: ${list} (\`headroom check --all ${path}\` lists every tensor)`,
    );
  }
  if (flags.json) {
    const payload = { spec: result.spec, plan: result.plan, lossScale: result.lossScale, tensor: found.tensor, caution: result.caution };
    process.stdout.write(JSON.stringify(payload, (_k, v: unknown) => (typeof v === "number" && !Number.isFinite(v) ? null : v), 2) + "\n");
    return;
  }
  process.stdout.write(
    renderExplainText(result, found.tensor, {
      style: stdoutStyle(),
      width: textWidth(),
    }),
  );
}
