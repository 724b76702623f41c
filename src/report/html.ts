/**
 * The HTML report: one self-contained file with inline CSS and SVG, no scripts (a Content-Security-Policy
 * forbids them), no network access. Every string that comes from a spec is escaped.
 */
import { scaleLinear } from "d3-scale";
import type { LossScaleSummary, SummaryVerdict } from "../batch/types.js";
import { formatRiskValue, verdictWords } from "./batch.js";
import { lossScaleClause } from "./loss-scale.js";
import { formatBinades, formatPowerOfTwo, formatValue } from "./number.js";
import type { ReportFormatRange, ReportLedger, ReportLossScale, ReportModel, ReportTensorBand } from "./report-model.js";

export type { ReportModel } from "./report-model.js";

/** The note every report carries: predictions are estimates. */
const CAVEAT =
  "These are predictions from a model of the network at initialisation and over the stated training horizon, " +
  "not guarantees. Confirm them with a short training run in the planned formats before committing accelerator time.";

/**
 * Escape text for HTML content and attribute values (double- or single-quoted).
 * @example escapeHtml('<b a="1">') // => "&lt;b a=&quot;1&quot;&gt;"
 */
export function escapeHtml(text: string): string {
  return text
    .replaceAll("&", "&amp;")
    .replaceAll("<", "&lt;")
    .replaceAll(">", "&gt;")
    .replaceAll('"', "&quot;")
    .replaceAll("'", "&#39;");
}

const e = escapeHtml;

/** Coordinates with one decimal: small files, and the same bytes on every run. */
function n(value: number): string {
  const rounded = Math.round(value * 10) / 10;
  return String(Object.is(rounded, -0) ? 0 : rounded);
}

/** A CSS-safe token for a verdict. */
function verdictClass(verdict: SummaryVerdict): string {
  return `v-${verdict}`;
}

function capitalised(text: string): string {
  return text.charAt(0).toUpperCase() + text.slice(1);
}

/** A titled list of sentences in the page's header; nothing when there are none. */
function headerList(title: string, items: readonly string[] | undefined): string {
  if (items === undefined || items.length === 0) return "";
  return `<p class="description">${e(title)}:</p><ul>${items.map((item) => `<li>${e(item)}</li>`).join("")}</ul>`;
}

/** "2^k" with the exponent raised, for SVG text. */
function powerSvg(exponent: number): string {
  return `2<tspan class="sup" dy="-5">${e(String(exponent))}</tspan>`;
}

/** "2^k" with the exponent raised, for HTML text. */
function powerHtml(exponent: number): string {
  return `2<sup>${e(String(exponent))}</sup>`;
}

// ---------------------------------------------------------------------------------------------
// the band chart: every tensor's magnitudes against the range of the format it is stored in

const CHART_WIDTH = 880;
const LABEL_WIDTH = 250;
const PLOT_LEFT = LABEL_WIDTH + 10;
const PLOT_RIGHT = CHART_WIDTH - 16;
const ROW = 18;
const GROUP_HEAD = 20;
const AXIS = 30;

function finiteOr(value: number, fallback: number): number {
  return Number.isFinite(value) ? value : fallback;
}

/**
 * The log2 span the band charts show: every tensor's band with a margin, widened to take in a format
 * edge (largest value, smallest normal, smallest subnormal) that lies within 12 binades of it, so the
 * edges that matter are in view while binary32's far edges do not squash the bands.
 */
export function bandDomain(tensors: readonly ReportTensorBand[], ranges: readonly ReportFormatRange[]): [number, number] {
  const lows = tensors.map((t) => finiteOr(t.lowLog2, t.rmsLog2)).filter(Number.isFinite);
  const highs = tensors.map((t) => finiteOr(t.highLog2, t.rmsLog2)).filter(Number.isFinite);
  let lo = lows.length > 0 ? Math.min(...lows) - 3 : -30;
  let hi = highs.length > 0 ? Math.max(...highs) + 3 : 20;
  for (const range of ranges) {
    for (const edge of [range.maxLog2, range.minNormalLog2, range.smallestLog2]) {
      if (edge >= lo - 12 && edge < lo) lo = edge - 2;
      if (edge <= hi + 12 && edge > hi) hi = edge + 2;
    }
  }
  lo = Math.max(lo, -1100);
  hi = Math.min(hi, 1100);
  if (hi - lo < 16) {
    const mid = (hi + lo) / 2;
    lo = mid - 8;
    hi = mid + 8;
  }
  const nice = scaleLinear().domain([lo, hi]).nice(12).domain();
  return [nice[0] ?? lo, nice[1] ?? hi];
}

function axisSvg(x: (v: number) => number, domain: readonly [number, number], y: number, below: boolean, count = 12): string {
  const ticks = scaleLinear().domain(domain).ticks(count).filter(Number.isInteger);
  const textY = below ? y + 16 : y - 8;
  let out = `<line class="axis" x1="${n(x(domain[0]))}" x2="${n(x(domain[1]))}" y1="${n(y)}" y2="${n(y)}"/>`;
  for (const tick of ticks) {
    out += `<line class="tick" x1="${n(x(tick))}" x2="${n(x(tick))}" y1="${n(y)}" y2="${n(y + (below ? 4 : -4))}"/>`;
    out += `<text class="tick-label" x="${n(x(tick))}" y="${n(textY)}" text-anchor="middle">${powerSvg(tick)}</text>`;
  }
  return out;
}

function gridSvg(x: (v: number) => number, domain: readonly [number, number], top: number, bottom: number, count = 12): string {
  return scaleLinear()
    .domain(domain)
    .ticks(count)
    .filter(Number.isInteger)
    .map((tick) => `<line class="grid" x1="${n(x(tick))}" x2="${n(x(tick))}" y1="${n(top)}" y2="${n(bottom)}"/>`)
    .join("");
}

/** Consecutive tensors of the same layer, in the order given. */
function groupByLayer(tensors: readonly ReportTensorBand[]): { layer: string; tensors: ReportTensorBand[] }[] {
  const groups: { layer: string; tensors: ReportTensorBand[] }[] = [];
  for (const tensor of tensors) {
    const last = groups.at(-1);
    if (last && last.layer === tensor.layer) last.tensors.push(tensor);
    else groups.push({ layer: tensor.layer, tensors: [tensor] });
  }
  return groups;
}

function truncateLabel(text: string, max: number): string {
  const chars = [...text];
  return chars.length <= max ? text : chars.slice(0, max - 1).join("") + "…";
}

function bandChartSvg(
  id: string,
  label: string,
  tensors: readonly ReportTensorBand[],
  ranges: ReadonlyMap<string, ReportFormatRange>,
  domain: readonly [number, number],
): string {
  const groups = groupByLayer(tensors);
  const height = AXIS + groups.length * GROUP_HEAD + tensors.length * ROW + AXIS;
  const x = scaleLinear().domain(domain).range([PLOT_LEFT, PLOT_RIGHT]).clamp(true);
  const top = AXIS;
  const bottom = height - AXIS;
  let body = "";
  let y = top;
  for (const group of groups) {
    body += `<text class="layer-name" x="8" y="${n(y + 14)}">${e(truncateLabel(group.layer, 40))}<title>${e(group.layer)}</title></text>`;
    y += GROUP_HEAD;
    for (const t of group.tensors) {
      const range = ranges.get(t.format);
      const mid = y + ROW / 2;
      if (range) {
        body += `<rect class="range-subnormal" fill="url(#${id}-hatch)" x="${n(x(range.smallestLog2))}" y="${n(y + 1)}" width="${n(Math.max(0, x(range.minNormalLog2) - x(range.smallestLog2)))}" height="${n(ROW - 2)}"/>`;
        body += `<rect class="range-normal" x="${n(x(range.minNormalLog2))}" y="${n(y + 1)}" width="${n(Math.max(0, x(range.maxLog2) - x(range.minNormalLog2)))}" height="${n(ROW - 2)}"/>`;
      }
      if (!Number.isFinite(t.rmsLog2)) {
        // an all-zero tensor (a bias at initialisation): nothing to place on the axis
        body += `<text class="zero-note" x="${n(PLOT_LEFT + 6)}" y="${n(mid + 4)}">all zero<title>${e(`${t.layer} · ${t.role}: every element is zero`)}</title></text>`;
        body += `<text class="role" x="${n(LABEL_WIDTH)}" y="${n(mid + 4)}" text-anchor="end">${e(truncateLabel(`${t.role} · ${t.format}`, 42))}</text>`;
        y += ROW;
        continue;
      }
      const low = finiteOr(t.lowLog2, domain[0]);
      const high = finiteOr(t.highLog2, domain[1]);
      const x0 = x(Math.min(low, high));
      const x1 = Math.max(x(Math.max(low, high)), x0 + 2);
      const tip =
        `${t.layer} · ${t.role} in ${t.format}: low ${formatPowerOfTwo(round1(t.lowLog2))}, rms ${formatPowerOfTwo(round1(t.rmsLog2))}, ` +
        `max ${formatPowerOfTwo(round1(t.highLog2))}; ${verdictWords(t.verdict)}${t.note ? ". " + t.note : ""}`;
      body += `<g class="band ${verdictClass(t.verdict)}"><title>${e(tip)}</title>`;
      body += `<rect class="band-bar" x="${n(x0)}" y="${n(mid - 4)}" width="${n(x1 - x0)}" height="8" rx="2"/>`;
      body += `<line class="band-rms" x1="${n(x(t.rmsLog2))}" x2="${n(x(t.rmsLog2))}" y1="${n(mid - 6)}" y2="${n(mid + 6)}"/>`;
      body += `</g>`;
      body += `<text class="role" x="${n(LABEL_WIDTH)}" y="${n(mid + 4)}" text-anchor="end">${e(truncateLabel(`${t.role} · ${t.format}`, 42))}</text>`;
      y += ROW;
    }
  }
  const axes = axisSvg(x, domain, top - 4, false) + axisSvg(x, domain, bottom + 4, true);
  return (
    `<svg class="chart band-chart" role="img" aria-label="${e(label)}" viewBox="0 0 ${CHART_WIDTH} ${n(height)}" ` +
    `width="${CHART_WIDTH}" height="${n(height)}" xmlns="http://www.w3.org/2000/svg">` +
    `<title>${e(label)}</title>${hatchPattern(`${id}-hatch`)}${gridSvg(x, domain, top, bottom)}${body}${axes}</svg>`
  );
}

/** Diagonal hatching for the subnormal range (ids are per chart: one document, no duplicates). */
function hatchPattern(id: string): string {
  return (
    `<defs><pattern id="${id}" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)">` +
    `<rect class="hatch-back" width="6" height="6"/><line class="hatch-line" x1="0" y1="0" x2="0" y2="6"/></pattern></defs>`
  );
}

function round1(value: number): number {
  return Math.round(value * 10) / 10;
}

function bandSection(model: ReportModel): string {
  if (model.tensors.length === 0) return `<p class="empty">The check predicted no tensors to chart.</p>`;
  const ranges = new Map(model.ranges.map((r) => [r.format, r]));
  const domain = bandDomain(model.tensors, model.ranges);
  const forward = model.tensors.filter((t) => t.pass === "forward");
  const backward = model.tensors.filter((t) => t.pass === "backward");
  let out =
    `<p>Each bar runs from a low quantile of a tensor's nonzero magnitudes to its predicted largest value, on a scale of ` +
    `powers of two; the tick marks its root mean square. Behind each bar is the range of the format the plan stores ` +
    `that tensor in: solid for normal numbers, hatched for subnormals (fewer significant bits). A bar that leaves its ` +
    `shading overflows on the right or flushes to zero on the left.` +
    (model.tensors.some((t) => t.scaleLog2 !== undefined)
      ? ` A tensor an 8-bit format holds with a per-tensor scale factor is drawn after that factor, as the format receives it.`
      : "") +
    `</p>`;
  out += legendHtml();
  for (const [id, title, list] of [
    ["forward", "Forward pass", forward],
    ["backward", "Backward pass", backward],
  ] as const) {
    if (list.length === 0) continue;
    out += `<figure class="chart-frame"><figcaption>${title}</figcaption><div class="scroll">${bandChartSvg(
      id,
      `${title}: predicted magnitude of each tensor against its format's range`,
      list,
      ranges,
      domain,
    )}</div></figure>`;
  }
  return out;
}

function legendHtml(): string {
  return (
    `<ul class="legend">` +
    `<li><span class="swatch sw-normal"></span>normal range of the format</li>` +
    `<li><span class="swatch sw-subnormal"></span>subnormal range</li>` +
    `<li><span class="swatch sw-fits"></span>fits</li>` +
    `<li><span class="swatch sw-at-risk"></span>at risk</li>` +
    `<li><span class="swatch sw-fails"></span>fails</li>` +
    `</ul>`
  );
}

// ---------------------------------------------------------------------------------------------
// the loss-scale window

function lossScaleSection(summary: LossScaleSummary, notes: readonly string[]): string {
  const notesHtml = notes.length > 0 ? `<ul class="notes">${notes.map((note) => `<li>${e(note)}</li>`).join("")}</ul>` : "";
  // the status in the shared wording (report/loss-scale.ts), as text and Markdown give it
  const status = `Loss scale: ${lossScaleClause(summary)}.`;
  const statusHtml = e(status).replace(/2\^(-?\d+)/g, (_power, k: string) => powerHtml(Number(k)));
  if (summary.status === "not-evaluated") {
    return `<p class="not-evaluated"><strong>${statusHtml}</strong> This check did not work out a loss-scale window for the plan.</p>${notesHtml}`;
  }
  if (summary.status === "not-needed") {
    return `<p>${statusHtml} Whether any gradient overflows or flushes without a loss scale is in the tensors' findings.</p>${notesHtml}`;
  }
  if (summary.status === "empty") {
    return `<p class="empty-window"><strong>${statusHtml}</strong> ${e(summary.sentence)}</p>${notesHtml}`;
  }
  const lo = Math.min(0, summary.lowestLog2 - 3);
  const hi = Math.max(24, summary.highestLog2 + 3);
  const width = CHART_WIDTH;
  const height = 92;
  const x = scaleLinear().domain([lo, hi]).range([40, width - 40]).clamp(true);
  const ticks = scaleLinear().domain([lo, hi]).ticks(Math.min(hi - lo, 16)).filter(Number.isInteger);
  let svg = `<svg class="chart scale-chart" role="img" aria-label="Loss-scale window" viewBox="0 0 ${width} ${height}" width="${width}" height="${height}" xmlns="http://www.w3.org/2000/svg"><title>Loss-scale window from ${formatPowerOfTwo(summary.lowestLog2)} to ${formatPowerOfTwo(summary.highestLog2)}, pick ${formatPowerOfTwo(summary.pickLog2)}</title>`;
  svg += `<rect class="scale-track" x="${n(x(lo))}" y="30" width="${n(x(hi) - x(lo))}" height="20"/>`;
  svg += `<rect class="scale-window" x="${n(x(summary.lowestLog2))}" y="30" width="${n(Math.max(2, x(summary.highestLog2) - x(summary.lowestLog2)))}" height="20"/>`;
  svg += `<line class="scale-pick" x1="${n(x(summary.pickLog2))}" x2="${n(x(summary.pickLog2))}" y1="22" y2="58"/>`;
  svg += `<text class="scale-pick-label" x="${n(x(summary.pickLog2))}" y="16" text-anchor="middle">pick ${powerSvg(summary.pickLog2)}</text>`;
  for (const tick of ticks) {
    svg += `<line class="tick" x1="${n(x(tick))}" x2="${n(x(tick))}" y1="50" y2="55"/>`;
    svg += `<text class="tick-label" x="${n(x(tick))}" y="72" text-anchor="middle">${powerSvg(tick)}</text>`;
  }
  svg += `</svg>`;
  return `<p>${statusHtml}</p><figure class="chart-frame"><div class="scroll">${svg}</div></figure>${notesHtml}`;
}

// a section named by its gradient format when the report shows it by name
function namedLossScaleSection(scale: ReportLossScale): string {
  const body = lossScaleSection(scale.summary, scale.notes);
  return scale.format === undefined ? body : `<h3>${e(scale.format)} gradients</h3>${body}`;
}

// ---------------------------------------------------------------------------------------------
// the ledger as a waterfall of per-layer factors

function ledgerSection(ledger: ReportLedger | null): string {
  if (!ledger || ledger.steps.length === 0) {
    return `<p class="not-evaluated">No tensor is at risk, so there is no ledger to show.</p>`;
  }
  let running = 0;
  const bars = ledger.steps.map((step) => {
    const from = running;
    running += step.log2Factor;
    return { step, from, to: running };
  });
  const values = bars.flatMap((b) => [b.from, b.to]);
  const lo = Math.floor(Math.min(0, ...values)) - 1;
  const hi = Math.ceil(Math.max(0, ...values)) + 1;
  const domain = scaleLinear().domain([lo, hi]).nice(10).domain() as [number, number];
  const x = scaleLinear().domain(domain).range([PLOT_LEFT, PLOT_RIGHT - 50]);
  const height = AXIS + (bars.length + 1) * ROW + AXIS;
  let svg = `<svg class="chart ledger-chart" role="img" aria-label="${e(`Ledger of ${ledger.subject}`)}" viewBox="0 0 ${CHART_WIDTH} ${n(height)}" width="${CHART_WIDTH}" height="${n(height)}" xmlns="http://www.w3.org/2000/svg"><title>${e(`How ${ledger.subject} got its size: per-layer factors in binades`)}</title>`;
  svg += gridSvg(x, domain, AXIS, height - AXIS, 10);
  svg += `<line class="zero" x1="${n(x(0))}" x2="${n(x(0))}" y1="${AXIS}" y2="${n(height - AXIS)}"/>`;
  let y = AXIS;
  for (const bar of bars) {
    const grows = bar.to >= bar.from;
    const x0 = x(Math.min(bar.from, bar.to));
    const w = Math.max(1.5, Math.abs(x(bar.to) - x(bar.from)));
    svg += `<g class="${grows ? "step-up" : "step-down"}"><title>${e(`${bar.step.layer}: ${bar.step.rule} (${bar.step.source})`)}</title>`;
    svg += `<rect x="${n(x0)}" y="${n(y + 4)}" width="${n(w)}" height="${n(ROW - 8)}"/></g>`;
    svg += `<text class="role" x="${n(LABEL_WIDTH)}" y="${n(y + ROW / 2 + 4)}" text-anchor="end">${e(truncateLabel(bar.step.layer, 40))}</text>`;
    svg += `<text class="step-value" x="${n(x0 + w + 4)}" y="${n(y + ROW / 2 + 4)}">${e(signed(bar.step.log2Factor))}</text>`;
    y += ROW;
  }
  svg += `<g class="step-total"><rect x="${n(x(Math.min(0, running)))}" y="${n(y + 3)}" width="${n(Math.max(1.5, Math.abs(x(running) - x(0))))}" height="${n(ROW - 6)}"/></g>`;
  svg += `<text class="role total" x="${n(LABEL_WIDTH)}" y="${n(y + ROW / 2 + 4)}" text-anchor="end">product</text>`;
  svg += axisSvg(x, domain, AXIS - 4, false, 10) + axisSvg(x, domain, height - AXIS + 4, true, 10);
  svg += `</svg>`;
  const rows = ledger.steps
    .map(
      (step) =>
        `<tr><td>${e(step.layer)}</td><td>${e(step.rule)}</td><td class="num">${e(signed(step.log2Factor))}</td><td>${e(step.source)}</td></tr>`,
    )
    .join("");
  return (
    `<p>The predicted size of <code>${e(ledger.subject)}</code> is a product of one factor per layer (the chain rule). ` +
    `Each bar is one factor in binades: to the right it grows the tensor, to the left it shrinks it. ` +
    `They add up to ${e(signed(running))} binades: the tensor's rms at the start of training is ${powerHtml(round1(ledger.rmsLog2))}` +
    // the ledger is the start's; a finding at the end of the horizon, or after the loss scale, is about another size
    (Number.isFinite(ledger.endRmsLog2) && round1(ledger.endRmsLog2) !== round1(ledger.rmsLog2)
      ? `, and ${powerHtml(round1(ledger.endRmsLog2))} at the end of the horizon`
      : "") +
    (ledger.scaleLog2 !== 0 && Number.isFinite(ledger.scaleLog2)
      ? `; the check multiplies it by the loss scale ${powerHtml(round1(ledger.scaleLog2))} before judging it`
      : "") +
    `.</p>` +
    `<figure class="chart-frame"><div class="scroll">${svg}</div></figure>` +
    `<div class="scroll"><table><thead><tr><th>layer</th><th>rule</th><th class="num">binades</th><th>source</th></tr></thead><tbody>${rows}</tbody></table></div>`
  );
}

function signed(binades: number): string {
  const text = formatBinades(binades);
  return binades > 0 && text !== "0.0" ? `+${text}` : text;
}

// ---------------------------------------------------------------------------------------------
// tables

function formatsTable(model: ReportModel): string {
  const ranges = new Map(model.ranges.map((r) => [r.format, r]));
  const rows = model.formats
    .map((f) => {
      const r = ranges.get(f.format);
      const range = r
        ? `<td class="num">${powerHtml(round1(r.smallestLog2))}</td><td class="num">${powerHtml(round1(r.minNormalLog2))}</td><td class="num">${e(formatValue(r.largest, 5))}</td>`
        : `<td></td><td></td><td></td>`;
      const roles = (f.planned === false ? "in place of the plan's formats: " : "") + f.roles.join(", ");
      return `<tr><td>${e(f.format)}</td><td>${e(roles)}</td><td><span class="pill ${verdictClass(f.verdict)}">${e(verdictWords(f.verdict))}</span></td>${range}</tr>`;
    })
    .join("");
  return (
    `<div class="scroll"><table><thead><tr><th>format</th><th>holds</th><th>verdict</th>` +
    `<th class="num">smallest kept</th><th class="num">smallest normal</th><th class="num">largest</th></tr></thead><tbody>${rows}</tbody></table></div>`
  );
}

const FINDINGS_SHOWN = 60;

function findingsTable(model: ReportModel): string {
  if (model.findings.length === 0) return `<p>Nothing crossed a threshold.</p>`;
  const rows = model.findings
    .slice(0, FINDINGS_SHOWN)
    .map(
      (f) =>
        `<tr><td><code>${e(f.subject)}</code></td><td>${e(f.format)}</td><td><span class="pill ${verdictClass(f.verdict)}">${e(verdictWords(f.verdict))}</span></td>` +
        `<td>${e(f.label)}</td><td class="num">${e(formatRiskValue(f))}</td><td>${e(f.sentence)}</td></tr>`,
    )
    .join("");
  const more =
    model.findings.length > FINDINGS_SHOWN
      ? `<p class="more">${model.findings.length - FINDINGS_SHOWN} more findings are in the JSON output of <code>headroom check</code>.</p>`
      : "";
  return (
    `<div class="scroll"><table class="findings"><thead><tr><th>tensor or operation</th><th>format</th><th>verdict</th><th>what</th>` +
    `<th class="num">how much</th><th>in words</th></tr></thead><tbody>${rows}</tbody></table></div>${more}`
  );
}

// ---------------------------------------------------------------------------------------------
// the page

const PALETTE = {
  paper: "#fbfaf6",
  ink: "#1f2633",
  quiet: "#5d6675",
  rule: "#d9d5cb",
  fits: "#2e7d6b",
  atRisk: "#c27c0e",
  fails: "#b3263e",
  normal: "#d6e4ee",
  subnormal: "#edf2f6",
  hatch: "#a9bccb",
  up: "#a8552a",
  down: "#3f6e9a",
} as const;

const CSS = `
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: ${PALETTE.paper}; color: ${PALETTE.ink}; font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif; }
main { max-width: 60rem; margin: 0 auto; padding: 1.5rem 1.25rem 3rem; }
h1 { font-size: 1.9rem; line-height: 1.2; margin: 0.2rem 0 0.4rem; overflow-wrap: anywhere; }
h2 { font-size: 1.25rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.25rem; border-bottom: 2px solid ${PALETTE.rule}; break-after: avoid; }
.kicker { margin: 0; font-size: 0.8rem; letter-spacing: 0.08em; text-transform: uppercase; color: ${PALETTE.quiet}; }
.description { margin: 0 0 0.8rem; color: ${PALETTE.quiet}; overflow-wrap: anywhere; }
.facts { display: grid; grid-template-columns: max-content 1fr; gap: 0.1rem 0.8rem; margin: 0; font-size: 0.9rem; }
.facts dt { color: ${PALETTE.quiet}; }
.facts dd { margin: 0; overflow-wrap: anywhere; }
.verdict { margin-top: 1.4rem; padding: 1rem 1.2rem; border-left: 6px solid; background: #fff; border-radius: 4px; }
.verdict h2 { margin-top: 0; border: 0; }
.verdict-word { font-size: 1.6rem; font-weight: 700; margin: 0 0 0.4rem; }
.verdict.v-fits { border-color: ${PALETTE.fits}; } .verdict.v-fits .verdict-word { color: ${PALETTE.fits}; }
.verdict.v-at-risk { border-color: ${PALETTE.atRisk}; } .verdict.v-at-risk .verdict-word { color: ${PALETTE.atRisk}; }
.verdict.v-fails { border-color: ${PALETTE.fails}; } .verdict.v-fails .verdict-word { color: ${PALETTE.fails}; }
.reasons { margin: 0.2rem 0 0.6rem; padding-left: 1.2rem; overflow-wrap: anywhere; }
.caveat { margin: 0; font-size: 0.85rem; color: ${PALETTE.quiet}; }
.pill { display: inline-block; padding: 0 0.5em; border-radius: 0.8em; font-size: 0.85em; font-weight: 600; color: #fff; white-space: nowrap; }
.pill.v-fits { background: ${PALETTE.fits}; } .pill.v-at-risk { background: ${PALETTE.atRisk}; } .pill.v-fails { background: ${PALETTE.fails}; }
table { border-collapse: collapse; width: 100%; font-size: 0.9rem; }
th, td { text-align: left; vertical-align: top; padding: 0.3rem 0.6rem 0.3rem 0; border-bottom: 1px solid ${PALETTE.rule}; overflow-wrap: break-word; }
th { font-weight: 600; color: ${PALETTE.quiet}; white-space: nowrap; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
code { font: 0.9em ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; overflow-wrap: anywhere; }
.scroll { overflow-x: auto; }
figure.chart-frame { margin: 1rem 0; }
figcaption { font-weight: 600; margin-bottom: 0.3rem; }
svg.chart { display: block; width: 100%; height: auto; min-width: 36rem; font: 11px system-ui, sans-serif; }
svg .axis, svg .tick { stroke: ${PALETTE.quiet}; stroke-width: 1; }
svg .grid { stroke: ${PALETTE.rule}; stroke-width: 0.6; }
svg .tick-label { fill: ${PALETTE.quiet}; font-size: 10px; }
svg .sup { font-size: 8px; }
svg .layer-name { font-weight: 700; fill: ${PALETTE.ink}; }
svg .role { fill: ${PALETTE.quiet}; }
svg .role.total { font-weight: 700; fill: ${PALETTE.ink}; }
svg .range-normal { fill: ${PALETTE.normal}; }
svg .range-subnormal { stroke: ${PALETTE.hatch}; stroke-width: 0.6; }
svg .hatch-back { fill: ${PALETTE.subnormal}; }
svg .hatch-line { stroke: ${PALETTE.hatch}; stroke-width: 1; }
svg .band-rms { stroke: ${PALETTE.ink}; stroke-width: 1.6; }
svg .v-fits .band-bar { fill: ${PALETTE.fits}; }
svg .v-at-risk .band-bar { fill: ${PALETTE.atRisk}; }
svg .v-fails .band-bar { fill: ${PALETTE.fails}; }
svg .scale-track { fill: ${PALETTE.subnormal}; stroke: ${PALETTE.rule}; }
svg .scale-window { fill: ${PALETTE.fits}; opacity: 0.75; }
svg .scale-pick { stroke: ${PALETTE.ink}; stroke-width: 2.5; }
svg .scale-pick-label { font-weight: 700; fill: ${PALETTE.ink}; }
svg .step-up rect { fill: ${PALETTE.up}; }
svg .step-down rect { fill: ${PALETTE.down}; }
svg .step-total rect { fill: ${PALETTE.ink}; }
svg .step-value { fill: ${PALETTE.quiet}; font-size: 10px; }
svg .zero-note { fill: ${PALETTE.quiet}; font-style: italic; }
svg .zero { stroke: ${PALETTE.ink}; stroke-width: 1; }
.legend { list-style: none; display: flex; flex-wrap: wrap; gap: 0.4rem 1.2rem; padding: 0; margin: 0.6rem 0; font-size: 0.85rem; }
.swatch { display: inline-block; width: 1.1em; height: 0.8em; margin-right: 0.35em; vertical-align: -0.05em; border-radius: 2px; }
.sw-normal { background: ${PALETTE.normal}; } .sw-subnormal { background: repeating-linear-gradient(45deg, ${PALETTE.subnormal} 0 3px, ${PALETTE.hatch} 3px 4px); }
.sw-fits { background: ${PALETTE.fits}; } .sw-at-risk { background: ${PALETTE.atRisk}; } .sw-fails { background: ${PALETTE.fails}; }
.not-evaluated, .empty-window { padding: 0.6rem 0.8rem; background: #fff; border: 1px dashed ${PALETTE.rule}; border-radius: 4px; }
.notes { font-size: 0.9rem; color: ${PALETTE.quiet}; }
footer { margin-top: 3rem; font-size: 0.8rem; color: ${PALETTE.quiet}; }
@media (max-width: 40rem) {
  body { font-size: 15px; }
  main { padding: 1rem 0.75rem 2rem; }
  h1 { font-size: 1.45rem; }
  .facts { grid-template-columns: 1fr; }
  .facts dd { margin-bottom: 0.3rem; }
  table { font-size: 0.8rem; }
  table.findings td:last-child, table.findings th:last-child { display: none; }
}
@media print {
  body { background: #fff; font-size: 11pt; }
  main { max-width: none; padding: 0; }
  * { print-color-adjust: exact; -webkit-print-color-adjust: exact; }
  .scroll { overflow: visible; }
  svg.chart { min-width: 0; }
  figure, tr, .verdict { break-inside: avoid; }
  section { break-before: auto; }
}
`;

/**
 * Render the report as one HTML document. Pure: the same model gives the same bytes (no dates, no
 * random ids); nothing is fetched and no script runs when it is opened.
 */
export function renderHtmlReport(model: ReportModel): string {
  const reasons =
    model.reasons.length > 0
      ? `<ul class="reasons">${model.reasons.map((r) => `<li>${e(r)}</li>`).join("")}</ul>`
      : `<p>No tensor or operation crossed a threshold in the planned formats.</p>`;
  const assumptions =
    model.assumptions.length > 0
      ? `<ul>${model.assumptions.map((a) => `<li>${e(a)}</li>`).join("")}</ul>`
      : `<p>The prediction made no assumptions beyond the spec.</p>`;
  const body = [
    `<header><p class="kicker">headroom report</p><h1>${e(model.title)}</h1>`,
    model.description ? `<p class="description">${e(model.description)}</p>` : "",
    `<dl class="facts"><dt>spec</dt><dd><code>${e(model.source)}</code></dd><dt>precision plan</dt><dd>${e(model.plan)}${model.planSettings === undefined ? "" : ` (${e(model.planSettings)})`}</dd>`,
    `<dt>tensors</dt><dd>${model.tensors.length}</dd></dl>`,
    // recorded rows the check could not use: the user gave them, so the page says so before any verdict
    headerList("Recorded statistics not used", model.unusedStatistics),
    // the spec's warnings: judged as written, as the terminal and the Markdown say
    headerList("Warnings (judged as written)", model.warnings),
    `</header>`,
    `<section class="verdict ${verdictClass(model.verdict)}" aria-labelledby="verdict"><h2 id="verdict">Verdict</h2>`,
    `<p class="verdict-word">${e(capitalised(verdictWords(model.verdict)))}</p>${reasons}<p class="caveat">${e(CAVEAT)}</p></section>`,
    `<section aria-labelledby="formats"><h2 id="formats">${model.formats.every((f) => f.planned !== false) ? "Formats in the plan" : "Formats judged"}</h2>${formatsTable(model)}</section>`,
    `<section aria-labelledby="bands"><h2 id="bands">Where each tensor sits</h2>${bandSection(model)}</section>`,
    `<section aria-labelledby="scale"><h2 id="scale">Loss scale</h2>${[model.lossScale, ...(model.moreLossScales ?? [])].map(namedLossScaleSection).join("")}</section>`,
    `<section aria-labelledby="ledger"><h2 id="ledger">How the worst tensor got its size</h2>${ledgerSection(model.ledger)}</section>`,
    `<section aria-labelledby="findings"><h2 id="findings">Findings</h2>${findingsTable(model)}</section>`,
    `<section aria-labelledby="assumptions"><h2 id="assumptions">Assumptions</h2>${assumptions}</section>`,
    `<footer><p>Made by headroom ${e(model.version)}. ${e(CAVEAT)}</p></footer>`,
  ].join("\n");
  return (
    `<!doctype html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n` +
    `<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'">\n` +
    `<meta name="viewport" content="width=device-width, initial-scale=1">\n` +
    `<title>${e(`${model.title}: headroom report`)}</title>\n<style>${CSS}</style>\n</head>\n<body>\n<main>\n${body}\n</main>\n</body>\n</html>\n`
  );
}
