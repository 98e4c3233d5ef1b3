// Turns a costate solution document (docs/solution-format.md, version 1) into an HTML page of
// inline SVG charts: one per state and control, over the independent variable.
//
// This module must not import `vscode`: it is plain data in, strings out, so the unit tests run
// under node alone. It also must not reference anything outside the page (no scripts, fonts or
// images): the webview runs under a Content-Security-Policy of `default-src 'none'` and users'
// machines may be offline.

export interface Series {
  name: string;
  unit: string | null;
  /** `null` where the solver produced no finite value (JSON has no NaN). */
  values: (number | null)[];
}

export interface Solution {
  problem: string;
  status: string;
  solved: boolean;
  cost: number | null;
  sense: string;
  endTime: number | null;
  iterations: number | null;
  intervals: number | null;
  maxViolation: number | null;
  /** `constant` controls are drawn as steps, `linear` ones as lines. */
  controlShape: string;
  time: Series;
  states: Series[];
  controls: Series[];
}

export type ReadResult = { ok: true; solution: Solution } | { ok: false; reason: string };

function isObject(v: unknown): v is Record<string, unknown> {
  return typeof v === "object" && v !== null && !Array.isArray(v);
}

function num(v: unknown): number | null {
  return typeof v === "number" && Number.isFinite(v) ? v : null;
}

function readSeries(v: unknown, what: string): Series | string {
  if (!isObject(v) || typeof v.name !== "string" || !Array.isArray(v.values)) {
    return `${what} is not a series ({name, unit, values})`;
  }
  const unit = typeof v.unit === "string" && v.unit !== "" ? v.unit : null;
  return { name: v.name, unit, values: v.values.map(num) };
}

function readSeriesList(v: unknown, what: string): Series[] | string {
  if (v === undefined) {
    return [];
  }
  if (!Array.isArray(v)) {
    return `${what} is not a list`;
  }
  const out: Series[] = [];
  for (const [i, item] of v.entries()) {
    const s = readSeries(item, `${what}[${i}]`);
    if (typeof s === "string") {
      return s;
    }
    out.push(s);
  }
  return out;
}

/** Validates the parts of a solution document the plots need; other fields are optional. */
export function readSolution(doc: unknown): ReadResult {
  if (!isObject(doc)) {
    return { ok: false, reason: "the server's answer is not a JSON object" };
  }
  if (doc.format !== "costate-solution") {
    return { ok: false, reason: `unknown document format ${JSON.stringify(doc.format)} (expected "costate-solution")` };
  }
  if (doc.version !== 1) {
    return { ok: false, reason: `solution format version ${JSON.stringify(doc.version)} is not supported (this extension reads version 1)` };
  }
  const time = readSeries(doc.time, "time");
  if (typeof time === "string") {
    return { ok: false, reason: time };
  }
  const states = readSeriesList(doc.states, "states");
  if (typeof states === "string") {
    return { ok: false, reason: states };
  }
  const controls = readSeriesList(doc.controls, "controls");
  if (typeof controls === "string") {
    return { ok: false, reason: controls };
  }
  const settings = isObject(doc.settings) ? doc.settings : {};
  return {
    ok: true,
    solution: {
      problem: typeof doc.problem === "string" ? doc.problem : "(unnamed problem)",
      status: typeof doc.status === "string" ? doc.status : "unknown status",
      solved: doc.solved === true,
      cost: num(doc.cost),
      sense: typeof doc.sense === "string" ? doc.sense : "minimize",
      endTime: num(doc.end_time),
      iterations: num(doc.iterations),
      intervals: num(doc.intervals),
      maxViolation: num(doc.max_violation),
      controlShape: settings.control_shape === "linear" ? "linear" : "constant",
      time,
      states,
      controls,
    },
  };
}

/** A tick layout: multiples of `step` from `min` to `max` inclusive. */
export interface Ticks {
  min: number;
  max: number;
  step: number;
  values: number[];
}

/**
 * Round-number ticks (steps of 1, 2 or 5 times a power of ten) covering `[lo, hi]` with about
 * `target` intervals. The returned `min`/`max` are tick values enclosing the data, so the data
 * never touches outside the axis. A zero-width range is widened so it still gets an axis.
 */
export function niceTicks(lo: number, hi: number, target = 5): Ticks {
  if (!Number.isFinite(lo) || !Number.isFinite(hi)) {
    throw new RangeError(`niceTicks needs finite bounds, got ${lo} and ${hi}`);
  }
  if (lo > hi) {
    [lo, hi] = [hi, lo];
  }
  if (hi - lo <= Math.abs(hi) * 1e-12 || hi === lo) {
    const pad = lo === 0 ? 1 : Math.abs(lo) * 0.1;
    lo -= pad;
    hi += pad;
  }
  const raw = (hi - lo) / Math.max(1, target);
  const magnitude = Math.pow(10, Math.floor(Math.log10(raw)));
  const norm = raw / magnitude;
  const step = (norm < 1.5 ? 1 : norm < 3 ? 2 : norm < 7 ? 5 : 10) * magnitude;
  const first = Math.floor(lo / step + 1e-9);
  const last = Math.ceil(hi / step - 1e-9);
  const values: number[] = [];
  for (let k = first; k <= last; k++) {
    // k * step rather than repeated addition, so 0.1 + 0.2 style error never accumulates.
    values.push(roundTo(k * step, step));
  }
  return { min: values[0], max: values[values.length - 1], step, values };
}

function decimalsFor(step: number): number {
  return Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
}

function roundTo(v: number, step: number): number {
  const d = Math.min(20, decimalsFor(step) + 2);
  const r = Number(v.toFixed(d));
  return r === 0 ? 0 : r; // no "-0" labels
}

/** A tick label with as many decimals as the step needs; exponent form for very large or small. */
export function formatTick(v: number, step: number): string {
  if (v === 0) {
    return "0";
  }
  const big = Math.abs(v) >= 1e6;
  const tiny = step < 1e-4;
  if (big || tiny) {
    const digits = Math.max(0, Math.min(6, Math.floor(Math.log10(Math.abs(v))) - Math.floor(Math.log10(step))));
    return v.toExponential(digits).replace(/\.?0+e/, "e");
  }
  return v.toFixed(decimalsFor(step));
}

/** Maps a value linearly from `[d0, d1]` to `[r0, r1]`. */
export function scale(d0: number, d1: number, r0: number, r1: number): (v: number) => number {
  const span = d1 - d0;
  return (v) => (span === 0 ? (r0 + r1) / 2 : r0 + ((v - d0) / span) * (r1 - r0));
}

function coord(v: number): string {
  // Two decimals of a pixel are invisible; fewer characters keep large pages light.
  return (Math.round(v * 100) / 100).toString();
}

/**
 * The `d` attribute of an SVG path through the points `(xs[i], ys[i])`. A point with a missing
 * coordinate breaks the line (a new `M`). With `steps`, each value holds until the next node,
 * as a piecewise-constant control does.
 */
export function linePath(
  xs: (number | null)[],
  ys: (number | null)[],
  sx: (v: number) => number,
  sy: (v: number) => number,
  steps = false,
): string {
  const n = Math.min(xs.length, ys.length);
  const parts: string[] = [];
  let open = false;
  let lastY = 0;
  for (let i = 0; i < n; i++) {
    const x = xs[i];
    const y = ys[i];
    if (x === null || y === null) {
      open = false;
      continue;
    }
    const px = coord(sx(x));
    const py = coord(sy(y));
    if (!open) {
      parts.push(`M${px},${py}`);
      open = true;
    } else if (steps) {
      parts.push(`H${px}`);
      if (y !== lastY) {
        parts.push(`V${py}`);
      }
    } else {
      parts.push(`L${px},${py}`);
    }
    lastY = y;
  }
  return parts.join("");
}

export function escapeHtml(s: string): string {
  return s.replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" })[c]!);
}

export function seriesLabel(s: Series): string {
  return s.unit ? `${s.name} [${s.unit}]` : s.name;
}

export interface ChartOptions {
  width: number;
  height: number;
  /** Draw as steps (piecewise-constant controls). */
  steps: boolean;
  /** CSS class of the line, for its colour. */
  lineClass: string;
}

const MARGIN = { left: 72, right: 16, top: 26, bottom: 34 };

function finite(values: (number | null)[]): number[] {
  return values.filter((v): v is number => v !== null);
}

/** One chart: `series` over `time`, axes with round ticks, the label as its title. */
export function renderChart(time: Series, series: Series, options: ChartOptions): string {
  const { width, height } = options;
  const label = escapeHtml(seriesLabel(series));
  const head = `<svg class="chart" width="${width}" height="${height}" viewBox="0 0 ${width} ${height}" role="img" aria-label="${label} over ${escapeHtml(time.name)}"><title>${label}</title>`;
  const title = `<text class="title" x="${MARGIN.left}" y="16">${label}</text>`;
  const n = Math.min(time.values.length, series.values.length);
  const ts = finite(time.values.slice(0, n));
  const points = time.values.slice(0, n).filter((t, i) => t !== null && series.values[i] !== null).length;
  if (ts.length === 0 || points === 0) {
    return `${head}${title}<text class="empty" x="${width / 2}" y="${height / 2}" text-anchor="middle">no finite values</text></svg>`;
  }
  const ys = finite(series.values.slice(0, n));
  const xt = niceTicks(Math.min(...ts), Math.max(...ts), Math.max(2, Math.round(width / 110)));
  const yt = niceTicks(Math.min(...ys), Math.max(...ys), Math.max(2, Math.round(height / 45)));
  // The time axis spans the data exactly (a solve starts and ends somewhere definite); only the
  // value axis is widened to round ticks.
  const x0 = Math.min(...ts);
  const x1 = Math.max(...ts);
  const sx = scale(x0, x1, MARGIN.left, width - MARGIN.right);
  const sy = scale(yt.min, yt.max, height - MARGIN.bottom, MARGIN.top);
  const out: string[] = [head, title];
  for (const v of yt.values) {
    const y = coord(sy(v));
    out.push(`<line class="grid" x1="${MARGIN.left}" x2="${width - MARGIN.right}" y1="${y}" y2="${y}"/>`);
    out.push(`<text class="tick" x="${MARGIN.left - 6}" y="${y}" text-anchor="end" dominant-baseline="middle">${formatTick(v, yt.step)}</text>`);
  }
  for (const v of xt.values.filter((v) => v >= x0 - 1e-9 * Math.abs(x1 - x0) && v <= x1 + 1e-9 * Math.abs(x1 - x0))) {
    const x = coord(sx(v));
    out.push(`<line class="grid" x1="${x}" x2="${x}" y1="${MARGIN.top}" y2="${height - MARGIN.bottom}"/>`);
    out.push(`<text class="tick" x="${x}" y="${height - MARGIN.bottom + 16}" text-anchor="middle">${formatTick(v, xt.step)}</text>`);
  }
  out.push(
    `<rect class="frame" x="${MARGIN.left}" y="${MARGIN.top}" width="${width - MARGIN.left - MARGIN.right}" height="${height - MARGIN.top - MARGIN.bottom}"/>`,
  );
  const d = linePath(time.values.slice(0, n), series.values.slice(0, n), sx, sy, options.steps);
  out.push(`<path class="line ${options.lineClass}" d="${d}"/>`);
  out.push(
    `<text class="axis" x="${width - MARGIN.right}" y="${height - 4}" text-anchor="end">${escapeHtml(seriesLabel(time))}</text>`,
  );
  out.push("</svg>");
  return out.join("");
}

function fmtNumber(v: number | null): string {
  if (v === null) {
    return "–";
  }
  const a = Math.abs(v);
  return a !== 0 && (a >= 1e6 || a < 1e-3) ? v.toExponential(4) : Number(v.toPrecision(6)).toString();
}

export interface PageOptions {
  /** Nonce of the single `<style>` element; the CSP allows nothing else. */
  nonce: string;
  /** A line about refreshing (e.g. waiting for the solve after a save), or empty. */
  notice?: string;
  width?: number;
}

const STYLE = `
body { font-family: var(--vscode-font-family, sans-serif); font-size: var(--vscode-font-size, 13px);
  color: var(--vscode-foreground, #333); padding: 0 12px 16px; }
h1 { font-size: 1.3em; margin: 12px 0 4px; }
h2 { font-size: 1.1em; margin: 18px 0 4px; }
.summary { margin: 0 0 8px; opacity: 0.9; }
.banner { padding: 6px 10px; margin: 8px 0; border-left: 4px solid var(--vscode-editorWarning-foreground, #b58900);
  background: var(--vscode-textBlockQuote-background, rgba(127,127,127,0.1)); }
.notice { font-style: italic; opacity: 0.8; }
svg.chart { display: block; margin: 4px 0 10px; }
svg .title { font-weight: 600; fill: var(--vscode-foreground, #333); font-size: 12px; }
svg .tick, svg .axis, svg .empty { fill: var(--vscode-descriptionForeground, #777); font-size: 11px; }
svg .grid { stroke: var(--vscode-editorWidget-border, rgba(127,127,127,0.25)); stroke-width: 1; opacity: 0.5; }
svg .frame { fill: none; stroke: var(--vscode-editorWidget-border, rgba(127,127,127,0.5)); stroke-width: 1; }
svg .line { fill: none; stroke-width: 1.8; stroke-linejoin: round; }
svg .state { stroke: var(--vscode-charts-blue, #1f77b4); }
svg .control { stroke: var(--vscode-charts-orange, #d2691e); }
`;

function page(title: string, body: string, options: PageOptions): string {
  const nonce = escapeHtml(options.nonce);
  // Nothing may load: no scripts, no network, no fonts or images; only the one style element.
  const csp = `default-src 'none'; style-src 'nonce-${nonce}'; img-src 'none'; script-src 'none'; font-src 'none'; connect-src 'none'; frame-src 'none'; base-uri 'none'; form-action 'none'`;
  const notice = options.notice ? `<p class="notice">${escapeHtml(options.notice)}</p>` : "";
  return `<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="${csp}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${escapeHtml(title)}</title>
<style nonce="${nonce}">${STYLE}</style>
</head>
<body>
${notice}${body}
</body>
</html>
`;
}

/** The page shown when there is nothing to plot (no solution yet, or an unreadable answer). */
export function renderMessagePage(title: string, message: string, options: PageOptions): string {
  return page(title, `<h1>${escapeHtml(title)}</h1><p>${escapeHtml(message)}</p>`, options);
}

/** The whole webview page for a solution: a summary, then one chart per state and control. */
export function renderSolutionPage(solution: Solution, options: PageOptions): string {
  const width = options.width ?? 640;
  const height = 190;
  const summary = [
    `status: ${solution.status}`,
    `cost (${solution.sense}): ${fmtNumber(solution.cost)}`,
    `end ${solution.time.name}: ${fmtNumber(solution.endTime)}${solution.time.unit ? ` [${solution.time.unit}]` : ""}`,
    `iterations: ${fmtNumber(solution.iterations)}`,
    `intervals: ${fmtNumber(solution.intervals)}`,
    `max violation: ${fmtNumber(solution.maxViolation)}`,
  ];
  const parts: string[] = [
    `<h1>${escapeHtml(solution.problem)}</h1>`,
    `<p class="summary">${summary.map(escapeHtml).join(" · ")}</p>`,
  ];
  if (!solution.solved) {
    parts.push(
      `<p class="banner">The solver stopped with status “${escapeHtml(solution.status)}”: these curves are the last iterate, not an optimum.</p>`,
    );
  }
  const section = (heading: string, list: Series[], options2: Omit<ChartOptions, "width" | "height">) => {
    if (list.length === 0) {
      return;
    }
    parts.push(`<h2>${heading}</h2>`);
    for (const s of list) {
      parts.push(renderChart(solution.time, s, { width, height, ...options2 }));
    }
  };
  section("States", solution.states, { steps: false, lineClass: "state" });
  section("Controls", solution.controls, { steps: solution.controlShape === "constant", lineClass: "control" });
  return page(`costate: ${solution.problem}`, parts.join("\n"), options);
}
