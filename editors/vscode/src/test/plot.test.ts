// The solution page: reading the document, tick layout, SVG paths, and the page's safety
// properties (escaped names, a CSP that allows nothing but one nonce'd style, no URLs).
// The fixture is the crane example's solution as written by `costate solve` (format version 1).

import { test } from "node:test";
import * as assert from "node:assert/strict";
import * as fs from "node:fs";
import * as path from "node:path";
import {
  Series,
  formatTick,
  linePath,
  niceTicks,
  readSolution,
  renderChart,
  renderMessagePage,
  renderSolutionPage,
  scale,
} from "../plot";

const FIXTURE = path.resolve(__dirname, "..", "..", "test-fixtures", "crane_transfer.solution.json");

function crane(): Record<string, unknown> {
  return JSON.parse(fs.readFileSync(FIXTURE, "utf8"));
}

function count(haystack: string, needle: string | RegExp): number {
  return (haystack.match(new RegExp(needle, "g")) ?? []).length;
}

test("reads the crane solution document", () => {
  const read = readSolution(crane());
  assert.ok(read.ok, read.ok ? "" : read.reason);
  const s = read.solution;
  assert.equal(s.problem, "crane_transfer");
  assert.equal(s.solved, true);
  assert.equal(s.controlShape, "constant");
  assert.deepEqual(s.states.map((x) => x.name), ["x", "v", "theta", "omega"]);
  assert.deepEqual(s.controls.map((x) => `${x.name} [${x.unit}]`), ["a [m/s^2]"]);
  assert.equal(s.time.values.length, 61);
  assert.equal(s.time.unit, "s");
});

test("rejects documents that are not version-1 solutions, with a reason", () => {
  const cases: [unknown, RegExp][] = [
    [null, /not a JSON object/],
    [[1, 2], /not a JSON object/],
    [{ ...crane(), format: "other" }, /unknown document format/],
    [{ ...crane(), version: 2 }, /version 2 is not supported/],
    [{ ...crane(), time: [0, 1] }, /time is not a series/],
    [{ ...crane(), states: [{ name: "x" }] }, /states\[0\] is not a series/],
    [{ ...crane(), controls: {} }, /controls is not a list/],
  ];
  for (const [doc, reason] of cases) {
    const read = readSolution(doc);
    assert.equal(read.ok, false, JSON.stringify(doc)?.slice(0, 60));
    assert.match((read as { reason: string }).reason, reason);
  }
});

test("null values (NaN in the solver) stay null and missing lists are empty", () => {
  const doc = { ...crane(), controls: undefined, states: [{ name: "x", unit: null, values: [1, null, "3", 4] }] };
  const read = readSolution(doc);
  assert.ok(read.ok);
  assert.deepEqual(read.solution.states[0].values, [1, null, null, 4]);
  assert.equal(read.solution.states[0].unit, null);
  assert.deepEqual(read.solution.controls, []);
});

test("ticks are round multiples of 1, 2 or 5 times a power of ten that enclose the data", () => {
  assert.deepEqual(niceTicks(0, 9.47, 5).values, [0, 2, 4, 6, 8, 10]);
  assert.deepEqual(niceTicks(-0.08, 0.08, 4).values, [-0.1, -0.05, 0, 0.05, 0.1]);
  assert.deepEqual(niceTicks(0, 0.3, 3).values, [0, 0.1, 0.2, 0.3]);
  // A deterministic sweep over magnitudes and offsets instead of random input.
  let seed = 12345;
  const next = () => ((seed = (seed * 1103515245 + 12345) % 2 ** 31) / 2 ** 31);
  for (let i = 0; i < 2000; i++) {
    const magnitude = Math.pow(10, Math.floor(next() * 16) - 8);
    const lo = (next() - 0.5) * 10 * magnitude;
    const hi = lo + next() * 10 * magnitude + magnitude * 1e-3;
    const target = 2 + Math.floor(next() * 8);
    const t = niceTicks(lo, hi, target);
    const where = `lo=${lo} hi=${hi} target=${target}: ${JSON.stringify(t)}`;
    assert.ok(t.min <= lo && t.max >= hi, `ticks do not enclose the data, ${where}`);
    assert.ok(t.values.length >= 2 && t.values.length <= 2 * target + 3, `tick count, ${where}`);
    const mantissa = t.step / Math.pow(10, Math.floor(Math.log10(t.step) + 1e-9));
    assert.ok([1, 2, 5, 10].some((m) => Math.abs(mantissa - m) < 1e-9), `step ${t.step}, ${where}`);
    for (const v of t.values) {
      const k = v / t.step;
      assert.ok(Math.abs(k - Math.round(k)) < 1e-6, `tick ${v} not a multiple of ${t.step}, ${where}`);
      // Labels never show float noise such as 0.30000000000000004.
      assert.ok(formatTick(v, t.step).length <= 12, `label ${formatTick(v, t.step)}, ${where}`);
    }
  }
});

test("a flat series still gets an axis; non-finite bounds are refused", () => {
  const flat = niceTicks(3, 3);
  assert.ok(flat.min < 3 && flat.max > 3, JSON.stringify(flat));
  const zero = niceTicks(0, 0);
  assert.ok(zero.min < 0 && zero.max > 0, JSON.stringify(zero));
  assert.throws(() => niceTicks(0, Number.NaN), RangeError);
});

test("tick labels carry the decimals their step needs", () => {
  assert.equal(formatTick(0.1 + 0.2, 0.1), "0.3");
  assert.equal(formatTick(-0.05, 0.05), "-0.05");
  assert.equal(formatTick(2000, 500), "2000");
  assert.equal(formatTick(0, 1e-9), "0");
  assert.equal(formatTick(2.5e6, 5e5), "2.5e+6");
  assert.equal(formatTick(3e-6, 1e-6), "3e-6");
});

test("paths map the data, break at missing values and draw steps for constant controls", () => {
  const sx = scale(0, 10, 0, 100);
  const sy = scale(0, 1, 50, 0);
  assert.equal(linePath([0, 5, 10], [0, 1, 0.5], sx, sy), "M0,50L50,0L100,25");
  assert.equal(linePath([0, 5, 10, 15], [0, null, 0.5, 1], sx, sy), "M0,50M100,25L150,0");
  assert.equal(linePath([0, 5, 10], [1, 1, 0], sx, sy, true), "M0,0H50H100V50");
  assert.equal(linePath([0, 5], [1, 1, 1], sx, sy), "M0,0L50,0", "extra values beyond the time axis are ignored");
});

test("a chart has its title, ticks, a path and escapes names", () => {
  const time: Series = { name: "t", unit: "s", values: [0, 1, 2, 3] };
  const series: Series = { name: "<b>&x", unit: "m/s", values: [0, 2, 1, 3] };
  const svg = renderChart(time, series, { width: 600, height: 200, steps: false, lineClass: "state" });
  assert.ok(svg.includes("&lt;b&gt;&amp;x [m/s]"), svg);
  assert.ok(!svg.includes("<b>"), "an unescaped name reached the page");
  assert.equal(count(svg, "<path "), 1);
  assert.match(svg, /d="M72,\d/);
  assert.ok(count(svg, 'class="tick"') >= 4, "expected ticks on both axes");
  const empty = renderChart(time, { name: "x", unit: null, values: [null, null, null, null] }, {
    width: 600,
    height: 200,
    steps: false,
    lineClass: "state",
  });
  assert.ok(empty.includes("no finite values") && !empty.includes("<path"), empty);
});

test("the page has one chart per state and control and nothing that loads", () => {
  const read = readSolution(crane());
  assert.ok(read.ok);
  const html = renderSolutionPage(read.solution, { nonce: "abc123" });
  assert.equal(count(html, "<svg "), 5);
  assert.equal(count(html, 'class="line state"'), 4);
  assert.equal(count(html, 'class="line control"'), 1);
  // The control is piecewise constant: drawn with horizontal and vertical segments only.
  const control = /class="line control" d="([^"]*)"/.exec(html)![1];
  assert.match(control, /^M[\d.,]+(?:[HV][\d.]+)+$/);
  const csp = /<meta http-equiv="Content-Security-Policy" content="([^"]*)">/.exec(html);
  assert.ok(csp, "no CSP meta element");
  assert.match(csp[1], /default-src 'none'/);
  assert.match(csp[1], /style-src 'nonce-abc123'/);
  assert.doesNotMatch(csp[1], /unsafe|https?:|\*/);
  assert.equal(count(html, /<style nonce="abc123">/), 1);
  assert.equal(count(html, "<style"), 1);
  assert.doesNotMatch(html, /<script|https?:|src=|href=|url\(|@import|style="/i);
  assert.ok(html.includes("solved") && html.includes("crane_transfer"));
  assert.ok(!html.includes("last iterate"), "a solved result must not carry the warning");
});

test("an unsolved result carries a warning; a message page is safe too", () => {
  const doc = { ...crane(), status: "iteration limit reached", solved: false };
  const read = readSolution(doc);
  assert.ok(read.ok);
  const html = renderSolutionPage(read.solution, { nonce: "n", notice: "waiting <now>" });
  assert.ok(html.includes("“iteration limit reached”") && html.includes("last iterate"));
  assert.ok(html.includes("waiting &lt;now&gt;"));
  const message = renderMessagePage("No solution <yet>", "save & wait", { nonce: "n2" });
  assert.ok(message.includes("No solution &lt;yet&gt;") && message.includes("save &amp; wait"));
  assert.match(message, /default-src 'none'; style-src 'nonce-n2'/);
});
