/**
 * Scan throughput and memory on a generated 2 GiB F32 safetensors file (16 weight matrices of [8192, 4096]),
 * side by side with a plain sequential read of the same file in the same run (same 4 MiB reads, no decoding).
 * Each measurement runs in a child process, which reports its wall time and its peak RSS from
 * process.resourceUsage().maxRSS, so the figures are the scan's own.
 * Goals (issue 5): peak RSS under 150 MB; at least half the plain read's throughput; at least 1 GB/s from the page cache.
 * The file is written to os.tmpdir() before the runs and deleted after them. Run with `npm run bench`.
 */
import { execFileSync } from "node:child_process";
import { closeSync, openSync, rmSync, writeSync } from "node:fs";
import { loadavg, tmpdir } from "node:os";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { bench, describe } from "vitest";

const DIST = fileURLToPath(new URL("../dist/measure/index.js", import.meta.url));
const FILE = join(tmpdir(), `headroom-scan-bench-${process.pid}.safetensors`);
const TENSORS = 16;
const ROWS = 8192;
const COLUMNS = 4096;

/** Write the file tensor by tensor from one reused 32 MiB block of pseudo-normal values (sum of four uniforms). */
function generate(): number {
  const header: Record<string, unknown> = {};
  const bytesPer = ROWS * COLUMNS * 4;
  for (let t = 0; t < TENSORS; t++) {
    header[`blocks.${t}.mlp.weight`] = { dtype: "F32", shape: [ROWS, COLUMNS], data_offsets: [t * bytesPer, (t + 1) * bytesPer] };
  }
  let text = JSON.stringify(header);
  text += " ".repeat((8 - (text.length % 8)) % 8);
  const prefix = Buffer.alloc(8);
  prefix.writeBigUInt64LE(BigInt(text.length));
  const fd = openSync(FILE, "w");
  try {
    writeSync(fd, prefix);
    writeSync(fd, Buffer.from(text));
    const block = new Float32Array(8 * 1024 * 1024);
    let seed = 12345;
    const uniform = () => {
      seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
      return seed / 4294967296;
    };
    for (let i = 0; i < block.length; i++) block[i] = (uniform() + uniform() + uniform() + uniform() - 2) * 0.03;
    block[12345] = 9.5e4; // one value past binary16's range, so the scan has something to find
    const blockBytes = Buffer.from(block.buffer);
    for (let written = 0; written < TENSORS * bytesPer; written += blockBytes.length) writeSync(fd, blockBytes);
  } finally {
    closeSync(fd);
  }
  return 8 + text.length + TENSORS * bytesPer;
}

/** the scan in a child: argv[1] the file, argv[2] the comma-separated targets */
const SCAN_CHILD = `
import { castTarget, scanFile } from ${JSON.stringify(DIST)};
const targets = process.argv[2].split(",").map((n) => castTarget(n));
const cpu = process.cpuUsage();
const start = performance.now();
const scan = await scanFile(process.argv[1], { targets });
const seconds = (performance.now() - start) / 1000;
const used = process.cpuUsage(cpu);
if (scan.issues.length > 0 || scan.tensors.length !== ${TENSORS}) throw new Error("scan failed: " + JSON.stringify(scan.issues));
process.stdout.write(JSON.stringify({ seconds, cpuSeconds: (used.user + used.system) / 1e6, maxRssKiB: process.resourceUsage().maxRSS, overflowed: scan.tensors[0].casts[0].overflowed }));
`;

const READ_CHILD = `
import { open } from "node:fs/promises";
const handle = await open(process.argv[1], "r");
const buffer = Buffer.allocUnsafeSlow(4 * 1024 * 1024);
const cpu = process.cpuUsage();
const start = performance.now();
let position = 0;
let xor = 0;
for (;;) {
  const { bytesRead } = await handle.read(buffer, 0, buffer.length, position);
  if (bytesRead === 0) break;
  xor ^= buffer[bytesRead - 1];
  position += bytesRead;
}
const seconds = (performance.now() - start) / 1000;
const used = process.cpuUsage(cpu);
await handle.close();
process.stdout.write(JSON.stringify({ seconds, cpuSeconds: (used.user + used.system) / 1e6, maxRssKiB: process.resourceUsage().maxRSS, xor }));
`;

interface ChildRun {
  seconds: number;
  /** processor time of the child over the same stretch (all its threads) */
  cpuSeconds: number;
  maxRssKiB: number;
}

function runChild(code: string, ...args: string[]): ChildRun {
  const out = execFileSync(process.execPath, ["--input-type=module", "-e", code, FILE, ...args], { encoding: "utf8", maxBuffer: 1 << 20 });
  return JSON.parse(out) as ChildRun;
}

let bytes = 0;
let loadAtStart = 0;
let scans: ChildRun[] = [];
let scans8: ChildRun[] = [];
let reads: ChildRun[] = [];

function report(): void {
  const best = (runs: ChildRun[]) => Math.min(...runs.map((r) => r.seconds));
  const cpu = (runs: ChildRun[]) => Math.min(...runs.map((r) => r.cpuSeconds)).toFixed(2);
  const readRate = bytes / best(reads) / 1e9;
  const readPeakMb = (Math.max(...reads.map((r) => r.maxRssKiB)) * 1024) / 1e6;
  const lines = [
    `file: ${(bytes / 2 ** 30).toFixed(2)} GiB, ${TENSORS} tensors of [${ROWS}, ${COLUMNS}] F32, per-channel figures on`,
    `plain sequential read: ${readRate.toFixed(2)} GB/s (best of ${reads.length}), processor ${cpu(reads)} s, peak RSS ${readPeakMb.toFixed(0)} MB`,
    // other work on the machine slows the scan (CPU-bound) far more than the read (mostly waiting): note the load
    `load average (1 min) at the start and end of the runs: ${loadAtStart.toFixed(2)}, ${loadavg()[0]!.toFixed(2)}`,
  ];
  for (const [label, runs] of [
    ["scan --to binary16,bfloat16 (default)", scans],
    ["scan --to binary16,bfloat16,e4m3", scans8],
  ] as const) {
    const rate = bytes / best(runs) / 1e9;
    const peakMb = (Math.max(...runs.map((r) => r.maxRssKiB)) * 1024) / 1e6;
    lines.push(
      `${label}: ${rate.toFixed(2)} GB/s (best of ${runs.length}), ratio to the plain read ${(rate / readRate).toFixed(2)}, processor ${cpu(runs)} s, peak RSS ${peakMb.toFixed(0)} MB;` +
        ` goals: RSS < 150 MB ${peakMb < 150 ? "met" : "NOT met"}, half the read ${rate >= readRate / 2 ? "met" : "NOT met"}, 1 GB/s ${rate >= 1 ? "met" : "NOT met"}`,
    );
  }
  process.stdout.write("\n" + lines.join("\n") + "\n");
}

describe("scan a 2 GiB F32 safetensors file (children report wall time and peak RSS)", () => {
  bench(
    "one plain sequential read, then headroom scanFile with the default targets and with e4m3 added",
    () => {
      reads.push(runChild(READ_CHILD));
      scans.push(runChild(SCAN_CHILD, "binary16,bfloat16"));
      scans8.push(runChild(SCAN_CHILD, "binary16,bfloat16,e4m3"));
    },
    {
      iterations: 3,
      time: 1,
      warmupIterations: 0,
      warmupTime: 0,
      setup: (_task, mode) => {
        // the warm-up pass writes the file and warms the page cache; the measured pass starts afresh
        if (mode === "warmup") bytes = generate();
        loadAtStart = loadavg()[0]!;
        scans = [];
        scans8 = [];
        reads = [];
      },
      teardown: (_task, mode) => {
        if (mode !== "run") return;
        try {
          report();
        } finally {
          rmSync(FILE, { force: true });
        }
      },
    },
  );
});
