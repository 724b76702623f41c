import type { RegisterCommand } from "../commands.js";
import { lazyAction } from "./define.js";

/** `headroom schema`: print the JSON Schema (draft-07) of network spec files, for editors and CI checks. */
export const register: RegisterCommand = (program) => {
  program
    .command("schema")
    .description(
      "Print the JSON Schema (draft-07) of network spec files; point an editor at it for completion and checking " +
        "(specs/network-spec.schema.json is the same file)",
    )
    .action(lazyAction(() => import("../schema.js").then((m) => m.runSchema)));
};
