#!/usr/bin/env node
// A manual end-to-end try of the protocol this extension relies on, without VS Code: starts
// `<costate> lsp`, opens and saves a problem file the way the client does (with the `costate`
// settings), waits for diagnostics, then asks `costate/solution` until a solution arrives and
// draws it with the extension's own plotting code.
//
//   npm run compile
//   node scripts/smoke-lsp.mjs [path/to/costate] [file.costate]
//
// Defaults: `costate` on PATH and examples/crane_transfer.costate. The file is copied to a
// temporary directory first, so nothing the server writes lands in the repository.
// Exit status 0 when every step worked; the log says which step failed otherwise.

import { spawn } from "node:child_process";
import * as fs from "node:fs";
import * as os from "node:os";
import * as path from "node:path";
import { createRequire } from "node:module";
import { fileURLToPath, pathToFileURL } from "node:url";

const here = path.dirname(fileURLToPath(import.meta.url));
const require = createRequire(import.meta.url);
const plot = require(path.join(here, "..", "out", "plot.js"));

const server = process.argv[2] ?? "costate";
const source = path.resolve(process.argv[3] ?? path.join(here, "..", "..", "..", "examples", "crane_transfer.costate"));
const settings = { solveOnSave: true, solveIntervals: null };
const TIMEOUT_MS = 120_000;

const dir = fs.mkdtempSync(path.join(os.tmpdir(), "costate-smoke-"));
const file = path.join(dir, path.basename(source));
fs.copyFileSync(source, file);
const uri = pathToFileURL(file).toString();
const text = fs.readFileSync(file, "utf8");

const child = spawn(server, ["lsp"], { cwd: dir, stdio: ["pipe", "pipe", "inherit"] });
child.on("error", (e) => fail(`could not start '${server} lsp': ${e.message}`));

let nextId = 1;
const pending = new Map();
const waiters = [];
let buffer = Buffer.alloc(0);

function send(message) {
  const body = Buffer.from(JSON.stringify({ jsonrpc: "2.0", ...message }), "utf8");
  child.stdin.write(`Content-Length: ${body.length}\r\n\r\n`);
  child.stdin.write(body);
}

function request(method, params) {
  const id = nextId++;
  send({ id, method, params });
  return new Promise((resolve, reject) => pending.set(id, { resolve, reject, method }));
}

function notify(method, params) {
  send({ method, params });
}

/** Resolves with the first notification `method` whose params satisfy `test`. */
function waitFor(method, test = () => true) {
  return new Promise((resolve) => waiters.push({ method, test, resolve }));
}

function answerServerRequest(message) {
  // The client's side of server-to-client requests, as vscode-languageclient answers them.
  let result = null;
  if (message.method === "workspace/configuration") {
    result = message.params.items.map((item) =>
      item.section === "costate" ? settings : item.section?.startsWith("costate.") ? settings[item.section.slice(8)] ?? null : null,
    );
  }
  send({ id: message.id, result });
}

child.stdout.on("data", (chunk) => {
  buffer = Buffer.concat([buffer, chunk]);
  for (;;) {
    const headerEnd = buffer.indexOf("\r\n\r\n");
    if (headerEnd < 0) return;
    const header = buffer.subarray(0, headerEnd).toString("ascii");
    const length = Number(/Content-Length:\s*(\d+)/i.exec(header)?.[1]);
    if (!Number.isFinite(length)) fail(`bad header from the server: ${JSON.stringify(header)}`);
    if (buffer.length < headerEnd + 4 + length) return;
    const body = buffer.subarray(headerEnd + 4, headerEnd + 4 + length).toString("utf8");
    buffer = buffer.subarray(headerEnd + 4 + length);
    const message = JSON.parse(body);
    if (message.id !== undefined && message.method === undefined) {
      const p = pending.get(message.id);
      pending.delete(message.id);
      if (!p) continue;
      if (message.error) p.reject(new Error(`${p.method}: ${message.error.message} (${message.error.code})`));
      else p.resolve(message.result);
    } else if (message.id !== undefined) {
      answerServerRequest(message);
    } else {
      for (const [i, w] of waiters.entries()) {
        if (w.method === message.method && w.test(message.params)) {
          waiters.splice(i, 1);
          w.resolve(message.params);
          break;
        }
      }
    }
  }
});

function fail(why) {
  console.error(`smoke-lsp: FAILED: ${why}`);
  child.kill();
  process.exit(1);
}

function step(what) {
  console.log(`smoke-lsp: ${what}`);
}

const timer = setTimeout(() => fail(`no result within ${TIMEOUT_MS / 1000} s`), TIMEOUT_MS);

async function main() {
  const init = await request("initialize", {
    processId: process.pid,
    rootUri: pathToFileURL(dir).toString(),
    capabilities: { workspace: { configuration: true, didChangeConfiguration: { dynamicRegistration: false } } },
    initializationOptions: settings,
  });
  step(`initialized; server capabilities: ${Object.keys(init.capabilities ?? {}).join(", ")}`);
  notify("initialized", {});
  notify("workspace/didChangeConfiguration", { settings: { costate: settings } });

  const diagnostics = waitFor("textDocument/publishDiagnostics", (p) => p.uri === uri);
  notify("textDocument/didOpen", { textDocument: { uri, languageId: "costate", version: 1, text } });
  const d = await diagnostics;
  step(`diagnostics after open: ${d.diagnostics.length} (${d.diagnostics.map((x) => x.message).join("; ") || "none"})`);

  const before = await request("costate/solution", { uri });
  step(`costate/solution before save: ${before === null ? "null" : "a document"}`);

  notify("textDocument/didSave", { textDocument: { uri }, text });
  step("saved; asking costate/solution until a solution arrives");
  let doc = null;
  for (let i = 0; doc === null; i++) {
    await new Promise((r) => setTimeout(r, Math.min(3000, 250 * 2 ** i)));
    doc = await request("costate/solution", { uri });
  }
  const read = plot.readSolution(doc);
  if (!read.ok) fail(`the solution document is not readable: ${read.reason}`);
  const s = read.solution;
  step(`solution: ${s.problem}, status ${s.status}, cost ${s.cost}, ${s.states.length} states, ${s.controls.length} controls, ${s.time.values.length} nodes`);
  const html = plot.renderSolutionPage(s, { nonce: "smoke" });
  const charts = (html.match(/<svg /g) ?? []).length;
  if (charts !== s.states.length + s.controls.length) fail(`expected one chart per state and control, drew ${charts}`);
  const out = path.join(dir, "solution.html");
  fs.writeFileSync(out, html);
  step(`drew ${charts} charts: ${out}`);

  await request("shutdown", null);
  notify("exit", null);
  clearTimeout(timer);
  step("OK");
}

main().catch((e) => fail(e.message));
