import { specJsonSchemaText } from "../spec/index.js";

/** `headroom schema`: print the JSON Schema (draft-07) of network spec files, for editors and CI checks. */
export async function runSchema(): Promise<void> {
  process.stdout.write(specJsonSchemaText());
}
