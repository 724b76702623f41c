// Writes specs/network-spec.schema.json from the zod schema in src/spec (run `npm run schema`, which builds first).
// The file is committed; test/spec/schema.test.ts checks it equals what the code produces.
import { renameSync, writeFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { specJsonSchemaText } from "../dist/spec/index.js";

const target = fileURLToPath(new URL("../specs/network-spec.schema.json", import.meta.url));
const temporary = `${target}.${process.pid}.tmp`;
writeFileSync(temporary, specJsonSchemaText());
renameSync(temporary, target);
console.log(`wrote ${target}`);
