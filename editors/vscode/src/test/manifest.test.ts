// package.json is the extension's contract with VS Code and, through the settings, with the
// server: the commands the code registers, the settings it reads and the files it names must
// all be declared, and the names the server relies on must not change by accident.

import { test } from "node:test";
import * as assert from "node:assert/strict";
import * as fs from "node:fs";
import * as path from "node:path";

const EXT = path.resolve(__dirname, "..", "..");
const manifest = JSON.parse(fs.readFileSync(path.join(EXT, "package.json"), "utf8"));
const sources = fs
  .readdirSync(path.join(EXT, "src"))
  .filter((f) => f.endsWith(".ts"))
  .map((f) => fs.readFileSync(path.join(EXT, "src", f), "utf8"))
  .join("\n");

test("every registered command is contributed, and every contributed command registered", () => {
  const registered = [...sources.matchAll(/registerCommand\(\s*"([^"]+)"/g)].map((m) => m[1]).sort();
  const contributed = manifest.contributes.commands.map((c: { command: string }) => c.command).sort();
  assert.deepEqual(registered, contributed);
  assert.ok(registered.includes("costate.showSolution"));
  const show = manifest.contributes.commands.find((c: { command: string }) => c.command === "costate.showSolution");
  assert.equal(`${show.category}: ${show.title}`, "costate: Show Solution Plots");
});

test("the settings the server reads are declared with their types and defaults", () => {
  const props = manifest.contributes.configuration.properties;
  assert.equal(props["costate.solveOnSave"].type, "boolean");
  assert.equal(props["costate.solveOnSave"].default, true);
  assert.deepEqual(props["costate.solveIntervals"].type, ["integer", "null"]);
  assert.equal(props["costate.solveIntervals"].default, null);
  assert.equal(props["costate.server.path"].default, "costate");
  // Keys read in code, either as "costate.x" or as get("x") on the `costate` section.
  const read = new Set<string>();
  for (const m of sources.matchAll(/\.get<[^>]*>\(\s*"([^"]+)"/g)) read.add(`costate.${m[1]}`);
  assert.ok(read.size >= 3, [...read].join(" "));
  for (const key of read) {
    assert.ok(key in props, `${key} is read but not declared in package.json`);
  }
});

test("the server is started as `costate lsp` and asked for `costate/solution`", () => {
  assert.match(sources, /args: \["lsp"\]/);
  assert.match(sources, /SOLUTION_REQUEST = "costate\/solution"/);
  assert.match(sources, /configurationSection: SECTION/);
  assert.match(sources, /const SECTION = "costate"/);
});

test("the language, grammar and language configuration files exist and parse", () => {
  const [language] = manifest.contributes.languages;
  assert.equal(language.id, "costate");
  assert.deepEqual(language.extensions, [".costate"]);
  const config = JSON.parse(fs.readFileSync(path.join(EXT, language.configuration), "utf8"));
  assert.equal(config.comments.lineComment, "//");
  assert.ok(config.autoClosingPairs.some((p: { open: string }) => p.open === "["));
  assert.ok(new RegExp(config.folding.markers.start).test("state {"));
  assert.ok(new RegExp(config.folding.markers.end).test("}"));
  assert.ok(!new RegExp(config.folding.markers.start).test("  x' = v"));
  const [grammar] = manifest.contributes.grammars;
  assert.equal(grammar.scopeName, "source.costate");
  assert.equal(JSON.parse(fs.readFileSync(path.join(EXT, grammar.path), "utf8")).scopeName, "source.costate");
  assert.equal(manifest.main, "./out/extension.js");
});

test("only the language client is a runtime dependency", () => {
  assert.deepEqual(Object.keys(manifest.dependencies), ["vscode-languageclient"]);
  assert.ok(fs.existsSync(path.join(EXT, "package-lock.json")), "package-lock.json must be committed for npm ci");
});
