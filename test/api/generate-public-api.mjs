// Writes test/api/public-api.json: the sorted names the package exports (read from the build).
// Run after `npm run build` whenever the public API changes on purpose: node test/api/generate-public-api.mjs
import { writeFileSync } from "node:fs";

const api = await import(new URL("../../dist/index.js", import.meta.url).href);
const names = Object.keys(api).sort();
writeFileSync(new URL("./public-api.json", import.meta.url), JSON.stringify(names, null, 2) + "\n");
console.log(`${names.length} exports written to test/api/public-api.json`);
