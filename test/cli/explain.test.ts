import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

const CHAIN = "test/fixtures/specs/hazards/linear-chain-grow.yaml";
const STACK = /\n\s+at /;

describe("headroom explain (the built binary)", () => {
  it("shows each factor from the loss to the tensor, in log2 and as a multiplier, with its rule", () => {
    const run = runCli(["explain", CHAIN, "chain.0.dense-0/activation-gradient"]);
    expect(run.status).toBe(0);
    expect(run.stderr).toBe("");
    expect(run.stdout).toMatch(/Ledger: from the loss to this tensor/);
    // 99 layers above chain.0 each multiply the gradient rms by 1.5: log2 1.5 = 0.58 (the spec's std = 1.5/√64)
    const factorRows = run.stdout.split("\n").filter((line) => /\+0\.58\s+×1\.5\s/.test(line));
    expect(factorRows).toHaveLength(99);
    expect(run.stdout).toMatch(/dense: fan_out·var_w = 2\.25/);
    expect(run.stdout).toMatch(/overflows binary16/);
    expect(run.stdout).toMatch(/These are estimates/);
  });

  it("accepts a layer name and a role as two words", () => {
    const run = runCli(["explain", CHAIN, "chain.0.dense-0", "activation-gradient"]);
    expect(run.status).toBe(0);
    expect(run.stdout).toMatch(/^headroom explain: chain\.0\.dense-0\/activation-gradient/);
  });

  it("takes a layer and a role as two words when the layer has further tensors of that role (README: `layer/role` as two words)", () => {
    // the output layer of a cross-entropy loss has its activation gradient and the target-class part of it
    const run = runCli(["explain", "specs/wide-classifier.yaml", "species", "activation-gradient"]);
    expect(run.stderr).toBe("");
    expect(run.status).toBe(0);
    expect(run.stdout).toMatch(/^headroom explain: species\/activation-gradient \(/);
    const named = runCli(["explain", "specs/wide-classifier.yaml", "species", "activation-gradient:target-class"]);
    expect(named.stdout).toMatch(/^headroom explain: species\/activation-gradient:target-class \(/);
  });

  it("a layer with several tensors lists their ids (exit code 2, no stack trace)", () => {
    const run = runCli(["explain", CHAIN, "chain.0.dense-0"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toMatch(/"chain\.0\.dense-0" names 4 tensors .*chain\.0\.dense-0\/activation-gradient/);
    expect(run.stderr).not.toMatch(STACK);
  });

  it("an unknown tensor suggests the nearest ids", () => {
    const run = runCli(["explain", CHAIN, "chain.0.dense/weight"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/^headroom: no tensor "chain\.0\.dense\/weight" in .*; nearest ids: chain\.0\.dense-0\/weight/);
  });

  it("--json prints the tensor with its ledger", () => {
    const run = runCli(["explain", "--json", CHAIN, "chain.0.dense-0/activation-gradient"]);
    expect(run.status).toBe(0);
    const payload = JSON.parse(run.stdout) as { tensor: { id: string; ledger: unknown[] }; caution: string };
    expect(payload.tensor.id).toBe("chain.0.dense-0/activation-gradient");
    expect(payload.tensor.ledger.length).toBeGreaterThan(99);
    expect(payload.caution).toMatch(/short run/);
  });
});
