/**
 * Checks that look across keys (names, references, cycles, sizes that multiply) on the document as parsed,
 * before or without schema validation, so that every problem of a file is reported in one pass. Each check
 * reads defensively: values of the wrong kind are the schema's to report.
 */
import { didYouMean } from "./issues.js";
import type { RawIssue } from "./messages.js";
import { DEFAULT_PLAN_NAME } from "./normalize.js";
import { inputKindCount, lossScaleProblem, MAX_EXPANDED_LAYERS, MAX_TENSOR_ELEMENTS } from "./limits.js";

type Path = (string | number)[];

interface Found {
  errors: RawIssue[];
  warnings: RawIssue[];
}

function record(value: unknown): Record<string, unknown> | undefined {
  return typeof value === "object" && value !== null && !Array.isArray(value) ? (value as Record<string, unknown>) : undefined;
}

function layerType(item: unknown): string | undefined {
  if (typeof item === "string") return item;
  const type = record(item)?.["type"];
  return typeof type === "string" ? type : undefined;
}

function finite(value: unknown): number | undefined {
  return typeof value === "number" && Number.isFinite(value) ? value : undefined;
}

/** A layer list and where it is. */
interface LayerList {
  path: Path;
  items: unknown[];
}

/** Every layer list of the document: `layers`, each block, and the lists nested in residual and repeat layers. */
function layerLists(root: Record<string, unknown>): LayerList[] {
  const lists: LayerList[] = [];
  const visit = (items: unknown, path: Path) => {
    if (!Array.isArray(items)) return;
    lists.push({ path, items });
    items.forEach((item, index) => {
      const layer = record(item);
      if (!layer) return;
      if (layer["type"] === "residual") visit(layer["branch"], [...path, index, "branch"]);
      if (layer["type"] === "repeat") visit(layer["layers"], [...path, index, "layers"]);
    });
  };
  visit(root["layers"], ["layers"]);
  const blocks = record(root["blocks"]);
  if (blocks) for (const [name, items] of Object.entries(blocks)) visit(items, ["blocks", name]);
  return lists;
}

/** The name a layer goes by: its `name`, or `<type>-<index>`. */
export function layerNameAt(item: unknown, index: number): string | undefined {
  const given = record(item)?.["name"];
  if (typeof given === "string") return given;
  const type = layerType(item);
  return type === undefined ? undefined : `${type}-${index}`;
}

function checkNames(lists: LayerList[], found: Found): Set<string> {
  const all = new Set<string>();
  for (const list of lists) {
    const seen = new Map<string, number>();
    list.items.forEach((item, index) => {
      const name = layerNameAt(item, index);
      if (name === undefined) return;
      all.add(name);
      const earlier = seen.get(name);
      if (earlier === undefined) {
        seen.set(name, index);
        return;
      }
      const explicit = typeof record(item)?.["name"] === "string";
      const how = explicit ? "" : " (made from its type and index)";
      found.errors.push({
        path: explicit ? [...list.path, index, "name"] : [...list.path, index],
        atKey: false,
        message: `duplicate layer name ${JSON.stringify(name)}${how}: ${pathText([...list.path, earlier])} has it too`,
      });
    });
  }
  return all;
}

function pathText(path: Path): string {
  return path.map((segment, index) => (typeof segment === "number" ? `[${segment}]` : index === 0 ? segment : `.${segment}`)).join("");
}

/** `use` layers: the block must exist, and blocks must not use themselves, directly or through others. */
function checkBlocks(root: Record<string, unknown>, lists: LayerList[], found: Found): void {
  const blocks = record(root["blocks"]) ?? {};
  const blockNames = Object.keys(blocks);
  const uses = new Map<string, { block: string; path: Path }[]>();
  for (const list of lists) {
    const owner = list.path[0] === "blocks" ? String(list.path[1]) : undefined;
    list.items.forEach((item, index) => {
      const layer = record(item);
      if (layer?.["type"] !== "use" || typeof layer["block"] !== "string") return;
      const block = layer["block"];
      const path = [...list.path, index, "block"];
      if (!Object.hasOwn(blocks, block)) {
        const hint = didYouMean(block, blockNames);
        const known = blockNames.length === 0 ? "; the spec defines no blocks" : hint === "" ? `; blocks are: ${blockNames.join(", ")}` : hint;
        found.errors.push({ path, atKey: false, message: `unknown block ${JSON.stringify(block)}${known}` });
        return;
      }
      if (owner !== undefined) {
        const list = uses.get(owner) ?? [];
        list.push({ block, path });
        uses.set(owner, list);
      }
    });
  }
  // depth-first search; a use that reaches a block still on the stack closes a cycle
  const state = new Map<string, "open" | "done">();
  const stack: string[] = [];
  const visit = (name: string) => {
    state.set(name, "open");
    stack.push(name);
    for (const use of uses.get(name) ?? []) {
      const next = state.get(use.block);
      if (next === "open") {
        const cycle = [...stack.slice(stack.indexOf(use.block)), use.block];
        const message =
          cycle.length === 2
            ? `block ${JSON.stringify(use.block)} uses itself`
            : `blocks use each other in a cycle: ${cycle.join(" → ")}`;
        found.errors.push({ path: use.path, atKey: false, message });
      } else if (next === undefined) {
        visit(use.block);
      }
    }
    stack.pop();
    state.set(name, "done");
  };
  for (const name of blockNames) if (!state.has(name)) visit(name);
}

/** The number of layers once repeats and blocks are unrolled (Infinity past a cycle). */
function expandedCount(items: unknown, blocks: Record<string, unknown>, memo: Map<string, number>): number {
  if (!Array.isArray(items)) return 0;
  let total = 0;
  for (const item of items) {
    const layer = record(item);
    const type = layerType(item);
    if (type === "repeat" && layer) {
      const times = finite(layer["times"]) ?? 1;
      total += 1 + Math.max(1, times) * expandedCount(layer["layers"], blocks, memo);
    } else if (type === "residual" && layer) {
      total += 1 + expandedCount(layer["branch"], blocks, memo);
    } else if (type === "use" && layer && typeof layer["block"] === "string" && Object.hasOwn(blocks, layer["block"])) {
      const name = layer["block"];
      const known = memo.get(name);
      if (known !== undefined) total += known;
      else {
        memo.set(name, Infinity); // a cycle is reported elsewhere; stop here
        const count = expandedCount(blocks[name], blocks, memo);
        memo.set(name, count);
        total += count;
      }
    } else {
      total += 1;
    }
  }
  return total;
}

function checkExpansion(root: Record<string, unknown>, found: Found): void {
  const blocks = record(root["blocks"]) ?? {};
  const count = expandedCount(root["layers"], blocks, new Map());
  if (count > MAX_EXPANDED_LAYERS && Number.isFinite(count)) {
    // a count just past the limit, written as 1.00e+6, would read as the limit itself
    found.errors.push({
      path: ["layers"],
      atKey: false,
      message: `the network unrolls to ${Number.isSafeInteger(count) ? count : count.toExponential(2)} layers (repeats and blocks expanded), beyond the limit of ${MAX_EXPANDED_LAYERS}`,
    });
  }
}

/** The first layer the network really runs, following `use` into blocks. */
function firstLayer(root: Record<string, unknown>): { item: unknown; path: Path } | undefined {
  const blocks = record(root["blocks"]) ?? {};
  let items = root["layers"];
  let path: Path = ["layers"];
  for (let hops = 0; hops < 100; hops++) {
    if (!Array.isArray(items) || items.length === 0) return undefined;
    const item: unknown = items[0];
    const layer = record(item);
    if (layer?.["type"] === "use" && typeof layer["block"] === "string" && Object.hasOwn(blocks, layer["block"])) {
      path = ["blocks", layer["block"]];
      items = blocks[layer["block"]];
      continue;
    }
    return { item, path: [...path, 0] };
  }
  return undefined;
}

function checkEmbedding(root: Record<string, unknown>, lists: LayerList[], found: Found): void {
  const input = record(root["input"]);
  const first = firstLayer(root);
  const firstIsEmbedding = first !== undefined && layerType(first.item) === "embedding";
  const samePath = (a: Path, b: Path) => a.length === b.length && a.every((segment, index) => segment === b[index]);
  for (const list of lists) {
    list.items.forEach((item, index) => {
      if (layerType(item) !== "embedding") return;
      const path = [...list.path, index];
      if (first && samePath(path, first.path)) {
        if (input && inputKindCount(input) === 1 && !("tokens" in input)) {
          found.errors.push({
            path: ["input"],
            atKey: false,
            message: "the first layer is an embedding, which looks up token ids: give the input as { tokens: <sequence length> }",
          });
        }
      } else {
        found.errors.push({ path, atKey: false, message: "an embedding must be the network's first layer (it looks up token ids)" });
      }
    });
  }
  if (input && inputKindCount(input) === 1 && "tokens" in input && first && !firstIsEmbedding) {
    const type = layerType(first.item);
    found.errors.push({
      path: ["input", "tokens"],
      atKey: false,
      message: `token input needs an embedding as the first layer; ${pathText(first.path)} is ${type === undefined ? "not one" : `a ${type} layer`}`,
    });
  }
}

function checkSizes(root: Record<string, unknown>, lists: LayerList[], found: Found): void {
  const input = record(root["input"]);
  const batch = finite(record(root["training"])?.["batch"]);
  if (input && batch !== undefined) {
    const features = finite(input["features"]);
    const positions = finite(input["positions"]) ?? 1;
    const channels = finite(input["channels"]);
    const height = finite(input["height"]);
    const width = finite(input["width"]);
    let elements: number | undefined;
    let how = "";
    if (features !== undefined) {
      elements = batch * positions * features;
      how = "batch × positions × features";
    } else if (channels !== undefined && height !== undefined && width !== undefined) {
      elements = batch * channels * height * width;
      how = "batch × channels × height × width";
    }
    if (elements !== undefined && elements > MAX_TENSOR_ELEMENTS) {
      found.errors.push({
        path: ["input"],
        atKey: false,
        message: `one batch of input has ${elements.toExponential(2)} elements (${how}), beyond any real run (at most 1e12); check the sizes`,
      });
    }
  }
  for (const list of lists) {
    list.items.forEach((item, index) => {
      const layer = record(item);
      if (layer?.["type"] !== "embedding") return;
      const vocabulary = finite(layer["vocabulary"]);
      const width = finite(layer["width"]);
      if (vocabulary !== undefined && width !== undefined && vocabulary * width > MAX_TENSOR_ELEMENTS) {
        found.errors.push({
          path: [...list.path, index],
          atKey: false,
          message: `the embedding table has ${(vocabulary * width).toExponential(2)} elements (vocabulary × width), beyond any real run (at most 1e12); check the sizes`,
        });
      }
    });
  }
}

const EIGHT_BIT = new Set(["e4m3", "e5m2"]);
const PLAN_ROLES = ["activations", "weights", "gradients", "optimizer-states", "master-weights"] as const;

function checkPlan(plan: Record<string, unknown>, path: Path, found: Found): void {
  const scale = plan["loss-scale"];
  if (typeof scale === "number" && Number.isFinite(scale) && scale > 0) {
    const problem = lossScaleProblem(scale);
    if (problem !== undefined) found.errors.push({ path: [...path, "loss-scale"], atKey: false, message: `loss scale ${problem}` });
  }
  const accumulate = plan["accumulate"];
  if (typeof accumulate === "string" && EIGHT_BIT.has(accumulate)) {
    found.errors.push({
      path: [...path, "accumulate"],
      atKey: false,
      message: `products cannot accumulate in ${accumulate}: use binary16, bfloat16, tf32, binary32 or binary64`,
    });
  }
  const uses8bit = PLAN_ROLES.some((role) => typeof plan[role] === "string" && EIGHT_BIT.has(plan[role] as string));
  if (!uses8bit && (plan["scaling"] === "tensor" || plan["scaling"] === "block")) {
    found.warnings.push({
      path: [...path, "scaling"],
      atKey: false,
      message: "scaling applies to 8-bit formats only, and this plan uses none; it has no effect",
    });
  }
}

function checkPlans(root: Record<string, unknown>, found: Found): void {
  const plans = Array.isArray(root["plans"]) ? (root["plans"] as unknown[]) : [];
  const names = new Map<string, number>();
  plans.forEach((entry, index) => {
    const plan = record(entry);
    if (!plan) return;
    checkPlan(plan, ["plans", index], found);
    const name = plan["name"];
    if (typeof name !== "string") return;
    const earlier = names.get(name);
    if (earlier !== undefined) {
      found.errors.push({
        path: ["plans", index, "name"],
        atKey: false,
        message: `duplicate plan name ${JSON.stringify(name)}: plans[${earlier}] has it too`,
      });
    } else names.set(name, index);
  });
  const precision = root["precision"];
  if (typeof precision === "string") {
    if (!names.has(precision)) {
      const known = [...names.keys()];
      const hint = didYouMean(precision, known);
      const listing = known.length === 0 ? "; the spec defines no plans" : hint === "" ? `; plans are: ${known.join(", ")}` : hint;
      found.errors.push({ path: ["precision"], atKey: false, message: `unknown plan ${JSON.stringify(precision)}${listing}` });
    }
  } else {
    const plan = record(precision);
    if (plan) {
      checkPlan(plan, ["precision"], found);
      const name = plan["name"];
      if (typeof name === "string" && names.has(name)) {
        found.errors.push({
          path: ["precision", "name"],
          atKey: false,
          message: `plans[${names.get(name)}] is also named ${JSON.stringify(name)}: rename one, or write precision: ${name}`,
        });
      } else if (name === undefined && names.has(DEFAULT_PLAN_NAME)) {
        found.errors.push({
          path: ["plans", names.get(DEFAULT_PLAN_NAME)!, "name"],
          atKey: false,
          message: `"${DEFAULT_PLAN_NAME}" is the name precision takes when it gives none: rename this plan or name precision`,
        });
      }
    }
  }
}

function checkTraining(root: Record<string, unknown>, found: Found): void {
  const training = record(root["training"]);
  if (!training) return;
  const optimizer = record(training["optimizer"]);
  const horizon = record(training["horizon"]);
  if (optimizer) {
    const kind = optimizer["kind"];
    const base: Path = ["training", "optimizer"];
    if (typeof kind === "string") {
      if ("momentum" in optimizer && kind !== "momentum") {
        found.errors.push({
          path: [...base, "momentum"],
          atKey: true,
          message: `"momentum" is for kind momentum only, not ${kind}${kind.startsWith("adam") ? " (adam and adamw use betas)" : ""}`,
        });
      }
      for (const key of ["betas", "epsilon"]) {
        if (key in optimizer && (kind === "sgd" || kind === "momentum")) {
          found.errors.push({ path: [...base, key], atKey: true, message: `"${key}" is for adam and adamw only, not ${kind}` });
        }
      }
    }
    const rate = record(optimizer["learning-rate"]);
    const peak = finite(rate?.["peak"]);
    const end = finite(rate?.["end"]);
    if (peak !== undefined && end !== undefined && end > peak) {
      found.errors.push({
        path: [...base, "learning-rate", "end"],
        atKey: false,
        message: `the end learning rate (${end}) is above the peak (${peak})`,
      });
    }
    const warmup = finite(optimizer["warmup-steps"]);
    const steps = finite(horizon?.["steps"]);
    if (warmup !== undefined && steps !== undefined && warmup > steps) {
      found.warnings.push({
        path: [...base, "warmup-steps"],
        atKey: false,
        message: `warm-up (${warmup} steps) is longer than the horizon (${steps} steps): the peak learning rate is never reached`,
      });
    }
  }
  const loss = record(training["loss"]);
  const finalLoss = finite(horizon?.["final-loss"]);
  const classes = finite(loss?.["classes"]);
  if (loss?.["kind"] === "cross-entropy" && classes !== undefined && finalLoss !== undefined) {
    // an untrained classifier's cross-entropy is about ln(classes) per sample (uniform predictions); the final loss is
    // read per sample whatever the reduction (src/magnitude/loss.ts), so a summed loss given there reads as far too large
    const start = Math.log(classes);
    if (finalLoss >= start) {
      const perSample = loss["reduction"] === "sum" ? " (final-loss is the loss per sample, the mean over samples and positions, also with reduction: sum)" : "";
      found.warnings.push({
        path: ["training", "horizon", "final-loss"],
        atKey: false,
        message: `the final loss ${finalLoss} is not below the starting loss ln(${classes}) ≈ ${start.toFixed(2)}: gradients are taken not to shrink${perSample}`,
      });
    }
  }
}

function checkMeasuredNames(root: Record<string, unknown>, layerNames: Set<string>, found: Found): void {
  const names = record(record(root["measured"])?.["names"]);
  if (!names) return;
  for (const name of Object.keys(names)) {
    // `<layer>/<weight>` names one weight of the layer (src/measure/calibrate.ts matching rule)
    const slash = name.indexOf("/");
    const layer = layerNames.has(name) || slash < 0 ? name : name.slice(0, slash);
    if (!layerNames.has(layer)) {
      found.warnings.push({
        path: ["measured", "names", name],
        atKey: true,
        message: `no layer is named ${JSON.stringify(layer)}${didYouMean(layer, [...layerNames])}`,
      });
    }
  }
}

/** Every cross-key check, on the document as parsed (any shape). */
export function crossChecks(document: unknown): Found {
  const found: Found = { errors: [], warnings: [] };
  const root = record(document);
  if (!root) return found;
  const lists = layerLists(root);
  const names = checkNames(lists, found);
  checkBlocks(root, lists, found);
  checkExpansion(root, found);
  checkEmbedding(root, lists, found);
  checkSizes(root, lists, found);
  checkPlans(root, found);
  checkTraining(root, found);
  checkMeasuredNames(root, names, found);
  return found;
}
