import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { specJsonSchema, specJsonSchemaText } from "../../src/spec/index.js";

const committed = readFileSync(new URL("../../specs/network-spec.schema.json", import.meta.url), "utf8");

describe("specJsonSchema()", () => {
  it("equals the committed specs/network-spec.schema.json (regenerate with `npm run schema`)", () => {
    expect(committed).toBe(specJsonSchemaText());
  });

  it("is draft-07, so editors' YAML support can use it", () => {
    expect(specJsonSchema()["$schema"]).toBe("http://json-schema.org/draft-07/schema#");
  });

  it("allows a $schema key and refuses other unknown top-level keys", () => {
    const schema = specJsonSchema() as { properties: Record<string, unknown>; additionalProperties: unknown; required: string[] };
    expect(Object.keys(schema.properties)).toContain("$schema");
    expect(schema.additionalProperties).toBe(false);
    expect(schema.required.sort()).toEqual(["input", "layers", "training"]);
  });

  it("describes every key, for editor hovers", () => {
    const missing: string[] = [];
    const walk = (node: unknown, path: string) => {
      if (Array.isArray(node)) return node.forEach((item, index) => walk(item, `${path}[${index}]`));
      if (typeof node !== "object" || node === null) return;
      const record = node as Record<string, unknown>;
      const properties = record["properties"];
      if (typeof properties === "object" && properties !== null) {
        for (const [key, value] of Object.entries(properties)) {
          const described = typeof (value as Record<string, unknown>)["description"] === "string" || "$ref" in (value as object);
          if (!described) missing.push(`${path}.${key}`);
        }
      }
      for (const [key, value] of Object.entries(record)) walk(value, `${path}/${key}`);
    };
    walk(specJsonSchema(), "");
    expect(missing).toEqual([]);
  });

  it("returns a fresh copy each call", () => {
    const first = specJsonSchema();
    first["title"] = "changed";
    expect(specJsonSchema()["title"]).toBe("headroom network spec");
  });
});
