import type { RegisterCommand } from "../commands.js";
import type { runSchema } from "../schema.js";

/** `headroom schema`: print the JSON Schema (draft-07) of network spec files, for editors and CI checks. */
export const register: RegisterCommand = (program) => {
  program
    .command("schema")
    .description(
      "Print the JSON Schema (draft-07) of network spec files; point an editor at it for completion and checking " +
        "(specs/network-spec.schema.json is the same file)",
    )
    .action(async (...args: Parameters<typeof runSchema>) => {
      const { runSchema } = await import("../schema.js");
      await runSchema(...args);
    });
};
