import { existsSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { chromium, type Browser } from "playwright-core";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { runCli } from "../helpers/run.js";
import { check } from "../../src/check.js";
import { loadSpec } from "../../src/spec/index.js";
import { renderHtmlReport } from "../../src/report/html.js";
import { reportModel } from "../../src/report/report-from-check.js";
import type { CheckAnswer as CheckResult } from "../../src/check.js";

// The HTML report in a real browser: Debian's chromium driven by playwright-core (LIBRARIES.md §8).
// .ci/run installs chromium; without it this test is skipped with a message, never passed silently.
const CHROMIUM = "/usr/bin/chromium";
const HAVE_CHROMIUM = existsSync(CHROMIUM);
if (!HAVE_CHROMIUM) console.warn(`browser test skipped: ${CHROMIUM} is missing (install Debian's chromium: apt-get install -y chromium)`);

const OUT = fileURLToPath(new URL("./__out__/", import.meta.url));
const HOSTILE = "<script>alert(1)</script><b>x";
const EXAMPLES = ["specs/deep-relu-he.yaml", "specs/transformer-encoder.yaml"];

/** A check result whose first layer is renamed to `name` everywhere it appears (ids, ledgers, findings). */
function renameFirstLayer(result: CheckResult, name: string): CheckResult {
  const first = result.tensors.find((t) => t.family !== "input" && t.family !== "loss")!.layer;
  const swap = (text: string) => text.split(first).join(name);
  const json = JSON.stringify(result, (_key, value: unknown) => (typeof value === "string" ? swap(value) : value));
  return JSON.parse(json) as CheckResult;
}

describe.skipIf(!HAVE_CHROMIUM)("the HTML report in chromium", () => {
  let browser: Browser;
  let dir: string;
  beforeAll(async () => {
    mkdirSync(OUT, { recursive: true });
    dir = mkdtempSync(join(tmpdir(), "headroom-report-"));
    browser = await chromium.launch({
      executablePath: CHROMIUM,
      args: ["--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync"],
    });
  });
  afterAll(async () => {
    await browser?.close();
    rmSync(dir, { recursive: true, force: true });
  });

  test.each(EXAMPLES)("%s: charts present and sized, no requests, screenshot saved", async (spec) => {
    const file = join(dir, spec.replace(/\W+/g, "-") + ".html");
    const run = runCli(["report", spec, "-o", file]);
    expect(run.stderr).toBe("");
    expect(run.status).toBe(0);
    const page = await browser.newPage({ viewport: { width: 1100, height: 900 } });
    const requests: string[] = [];
    page.on("request", (request) => {
      if (!request.url().startsWith("file:")) requests.push(request.url());
    });
    const errors: string[] = [];
    page.on("pageerror", (error) => errors.push(error.message));
    await page.goto(`file://${file}`);
    const charts = page.locator("svg.chart");
    expect(await charts.count()).toBeGreaterThanOrEqual(2);
    for (const chart of await charts.all()) {
      const box = await chart.boundingBox();
      expect(box).not.toBeNull();
      expect(box!.width).toBeGreaterThan(300);
      expect(box!.height).toBeGreaterThan(40);
    }
    expect(await page.locator("svg.band-chart").count()).toBeGreaterThanOrEqual(1);
    expect(await page.locator("svg.band-chart .band-bar").count()).toBeGreaterThan(10);
    expect(await page.locator(".verdict-word").textContent()).toMatch(/^(Fits|At risk|Fails)$/);
    const shot = join(OUT, spec.replace(/\W+/g, "-") + ".png");
    await page.screenshot({ path: shot, fullPage: true });
    expect(readFileSync(shot).subarray(1, 4).toString()).toBe("PNG");
    // printed: the charts shrink to the page instead of being cut off
    await page.emulateMedia({ media: "print" });
    const printed = await page.locator("svg.band-chart").first().boundingBox();
    expect(printed!.width).toBeGreaterThan(300);
    expect(printed!.width).toBeLessThanOrEqual(1100);
    await page.pdf({ path: shot.replace(/\.png$/, ".pdf"), format: "A4" });
    await page.emulateMedia({ media: "screen" });
    // a narrow screen: the page does not scroll sideways; wide charts scroll inside their frames
    await page.setViewportSize({ width: 380, height: 800 });
    const overflow = await page.evaluate<number>("document.documentElement.scrollWidth - document.documentElement.clientWidth");
    expect(overflow).toBeLessThanOrEqual(1);
    await page.screenshot({ path: shot.replace(/\.png$/, "-narrow.png"), fullPage: true });
    expect(requests).toEqual([]);
    expect(errors).toEqual([]);
    await page.close();
  });

  test("a layer named <script>alert(1)</script><b>x renders as text and runs nothing", async () => {
    const loaded = await loadSpec(EXAMPLES[0]!);
    if (!loaded.ok) throw new Error(JSON.stringify(loaded.issues));
    const result = renameFirstLayer(check({ ...loaded.spec, name: HOSTILE, description: HOSTILE }, { ledger: true }), HOSTILE);
    expect(result.tensors.some((t) => t.layer === HOSTILE)).toBe(true);
    const file = join(dir, "hostile.html");
    writeFileSync(file, renderHtmlReport(reportModel(result, { version: "test" })));
    const page = await browser.newPage();
    let dialogs = 0;
    page.on("dialog", async (dialog) => {
      dialogs += 1;
      await dialog.dismiss();
    });
    await page.goto(`file://${file}`);
    expect(await page.locator("script").count()).toBe(0);
    expect(await page.locator("main b").count()).toBe(0);
    expect(await page.locator("h1").textContent()).toBe(HOSTILE);
    const layerLabels = await page.locator("svg .layer-name").allTextContents();
    expect(layerLabels.some((text) => text.startsWith(HOSTILE))).toBe(true);
    await page.screenshot({ path: join(OUT, "hostile.png"), fullPage: true });
    expect(dialogs).toBe(0);
    await page.close();
  });
});
