// editors/check-grammars.mjs must pass on the repository as it is, and fail when a grammar
// loses a word, when the language gains one, or when a source of words can no longer be read.
// Each case runs the script on a copy of the files it reads, changed in one place.

import { test } from "node:test";
import * as assert from "node:assert/strict";
import { spawnSync } from "node:child_process";
import * as fs from "node:fs";
import * as os from "node:os";
import * as path from "node:path";
import { REPO_ROOT } from "../testing/textmate";

const SCRIPT = path.join(REPO_ROOT, "editors", "check-grammars.mjs");
const INPUTS = [
  "docs/language.md",
  "crates/costate-syntax/src/lexer.rs",
  "crates/costate-syntax/src/parser/mod.rs",
  "crates/costate-syntax/src/parser/grammar.rs",
  "crates/costate-check/src/analysis.rs",
  "crates/costate-check/src/settings.rs",
  "editors/vscode/syntaxes/costate.tmLanguage.json",
  "editors/neovim/syntax/costate.vim",
  "editors/emacs/costate-mode.el",
];

function copyRoot(): string {
  const root = fs.mkdtempSync(path.join(os.tmpdir(), "costate-check-grammars-"));
  for (const rel of INPUTS) {
    fs.mkdirSync(path.dirname(path.join(root, rel)), { recursive: true });
    fs.copyFileSync(path.join(REPO_ROOT, rel), path.join(root, rel));
  }
  return root;
}

function edit(root: string, rel: string, change: (text: string) => string) {
  const file = path.join(root, rel);
  const before = fs.readFileSync(file, "utf8");
  const after = change(before);
  assert.notEqual(after, before, `the edit of ${rel} changed nothing`);
  fs.writeFileSync(file, after);
}

function run(root: string) {
  const r = spawnSync(process.execPath, [SCRIPT, "--root", root], { encoding: "utf8" });
  fs.rmSync(root, { recursive: true, force: true });
  return { status: r.status, out: r.stdout + r.stderr };
}

test("the repository's grammars pass", () => {
  const r = run(copyRoot());
  assert.equal(r.status, 0, r.out);
  assert.match(r.out, /3 grammars know all \d+ words/);
});

test("a word missing from the TextMate grammar's regexes fails", () => {
  const root = copyRoot();
  edit(root, "editors/vscode/syntaxes/costate.tmLanguage.json", (t) => t.replace(/\|atan2/g, ""));
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.match(r.out, /costate\.tmLanguage\.json: misses `atan2`, a built-in/);
  assert.doesNotMatch(r.out, /costate\.vim|costate-mode\.el/);
});

test("a word kept only in a comment of the Vim syntax file still fails", () => {
  const root = copyRoot();
  edit(root, "editors/neovim/syntax/costate.vim", (t) => t.replace("\\|guess", "") + '\n" guess\n');
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.match(r.out, /costate\.vim: misses `guess`/);
});

test("a word missing from the Emacs lists fails even if a docstring mentions it", () => {
  const root = copyRoot();
  edit(root, "editors/emacs/costate-mode.el", (t) => t.replace(' "within"', "") + '\n(defvar x nil "Tolerance: within.")\n');
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.match(r.out, /costate-mode\.el: misses `within`/);
});

test("a new parser keyword fails every grammar until they learn it", () => {
  const root = copyRoot();
  edit(root, "crates/costate-syntax/src/parser/mod.rs", (t) => t.replace('"solve", "expect",', '"solve", "expect", "objective",'));
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.equal((r.out.match(/misses `objective`/g) ?? []).length, 3, r.out);
});

test("a keyword table added to the lexer is read too", () => {
  const root = copyRoot();
  edit(root, "crates/costate-syntax/src/lexer.rs", (t) => t + '\npub const KEYWORDS: &[&str] = &["problem", "horizon"];\n');
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.match(r.out, /misses `horizon`/);
});

test("a new built-in in the checker or a new setting value in the docs fails", () => {
  const root = copyRoot();
  edit(root, "crates/costate-check/src/analysis.rs", (t) => t.replace('Builtin::Pi => "pi",', 'Builtin::Pi => "pi",\n            Builtin::Erf => "erf",'));
  edit(root, "docs/language.md", (t) => t.replace("`rk4`, `radau`", "`rk4`, `radau`, `gauss`"));
  const r = run(root);
  assert.equal(r.status, 1, r.out);
  assert.match(r.out, /misses `erf`, a built-in/);
  assert.match(r.out, /misses `gauss`, a setting value/);
});

test("a source that yields no words is an error, not a pass", () => {
  const root = copyRoot();
  edit(root, "docs/language.md", (t) => t.replace("**Keywords**", "**Words**"));
  const r = run(root);
  assert.equal(r.status, 2, r.out);
  assert.match(r.out, /no keyword found in docs\/language\.md/);
});
