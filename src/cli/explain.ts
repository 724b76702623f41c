import { renderExplainText } from "../report/check-explain.js";
import { colorEnabled, createStyle } from "../report/style.js";
import { findTensor } from "../risk/index.js";
import { addJudgeOptions, loadAndCheck, type JudgeFlags } from "./check.js";
import type { RegisterCommand } from "./commands.js";
import { UserError } from "./errors.js";

/** `headroom explain SPEC TENSOR`: the ledger of one tensor, factor by factor, and its risk. */
export const register: RegisterCommand = (program) => {
  const command = program
    .command("explain")
    .argument("<spec>", "network spec file (.yaml, .yml or .json)")
    .argument("<tensor...>", "the tensor: its id (dense-3/activation-gradient), or a layer name and a role")
    .description(
      "Show the ledger of one tensor: each factor from the loss (or the input) to it, in log2 and as a multiplier, " +
        "with the rule that produced it, then its risk in each format. Predictions are estimates; confirm with a short run.",
    )
    .option("--json", "print the tensor's part of the check result as JSON");
  addJudgeOptions(command).action(async (path: string, words: string[], flags: JudgeFlags & { json?: boolean }) => {
    const result = await loadAndCheck(path, flags, { ledger: true, everyFormat: true });
    if (result === undefined) return;
    const query = words.join(" ");
    const found = findTensor(result.tensors, query);
    if (!found.ok) {
      const list = found.candidates.join(", ");
      throw new UserError(
        found.reason === "ambiguous"
          ? `"${query}" names ${found.candidates.length} tensors of ${path}; give one id: ${list}`
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
        style: createStyle(colorEnabled(process.stdout, process.env)),
        width: Math.max(80, Math.min(140, process.stdout.columns ?? 100)),
      }),
    );
  });
};
