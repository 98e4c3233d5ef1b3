#!/usr/bin/env node
// Fails when an editor grammar misses a word of the costate language, so highlighting cannot
// drift from the compiler silently. Node only, no dependencies; run from anywhere:
//
//   node editors/check-grammars.mjs [--root REPO]
//
// The words are collected from both places that define them, and a grammar must know all of
// them: docs/language.md (keywords, built-in functions, settings table) and the Rust sources
// (the parser's keyword tables and the words it matches, the checker's built-in and settings
// tables). The lexer has no keyword table: it lexes every word as an identifier and the parser
// decides, so a keyword table added to lexer.rs later is read as well.
//
// A source that yields no words is an error too: a moved file must not turn the check into a
// check of nothing.

import * as fs from "node:fs";
import * as path from "node:path";
import { fileURLToPath } from "node:url";

/** Grammar files, relative to the repository root, and how to read the words they highlight. */
export const GRAMMARS = [
  { file: "editors/vscode/syntaxes/costate.tmLanguage.json", read: textMateWords },
  { file: "editors/neovim/syntax/costate.vim", read: vimWords },
  { file: "editors/emacs/costate-mode.el", read: emacsWords },
];

const IDENT = /^[A-Za-z_][A-Za-z0-9_]*$/;

function quoted(text) {
  return [...text.matchAll(/"([A-Za-z_][A-Za-z0-9_]*)"/g)].map((m) => m[1]);
}

function backticked(text) {
  return [...text.matchAll(/`([^`]+)`/g)].map((m) => m[1]);
}

/** Words of the language by kind, each with the sources it came from. */
export function languageWords(root) {
  const read = (rel) => {
    const full = path.join(root, rel);
    if (!fs.existsSync(full)) {
      throw new Error(`${rel} not found: has it moved? Update editors/check-grammars.mjs`);
    }
    return fs.readFileSync(full, "utf8");
  };
  const words = new Map(); // word -> Set of "kind: source"
  const add = (kind, source, list) => {
    const found = list.filter((w) => IDENT.test(w));
    if (found.length === 0) {
      throw new Error(`no ${kind} found in ${source}: its layout changed; update editors/check-grammars.mjs`);
    }
    for (const w of found) {
      if (!words.has(w)) words.set(w, new Set());
      words.get(w).add(`${kind} (${source})`);
    }
  };

  const doc = read("docs/language.md");
  const keywordsBullet = /\*\*Keywords\*\*([\s\S]*?)(?=\n\s*\n|\n- )/.exec(doc);
  // The bullet groups words in one code span: (`problem const fn ...`).
  add("keyword", "docs/language.md, Keywords", keywordsBullet ? backticked(keywordsBullet[1]).flatMap((b) => b.split(/\s+/)) : []);
  const builtins = /Built-in functions:([\s\S]*?)\n\s*\n/.exec(doc);
  add(
    "built-in",
    "docs/language.md, Built-in functions",
    builtins ? backticked(builtins[1]).flatMap((b) => b.split(/\s+/)).map((b) => b.replace(/\(.*$/, "")) : [],
  );
  const settingsTable = /\| key \| values \|[^\n]*\n\|[-| ]+\|\n((?:\|[^\n]*\n)+)/.exec(doc);
  const rows = settingsTable ? settingsTable[1].trim().split("\n").map((r) => r.split("|").map((c) => c.trim())) : [];
  add("setting", "docs/language.md, Settings", rows.flatMap((r) => backticked(r[1] ?? "")));
  add("setting value", "docs/language.md, Settings", rows.flatMap((r) => backticked(r[2] ?? "")));

  // Keyword tables (`const BLOCK_KEYWORDS: &[&str] = &[...]`) in the syntax crate, lexer included.
  const tables = [];
  for (const rel of ["crates/costate-syntax/src/lexer.rs", "crates/costate-syntax/src/parser/mod.rs", "crates/costate-syntax/src/parser/grammar.rs"]) {
    const text = read(rel);
    for (const m of text.matchAll(/const\s+[A-Z_]*(?:KEYWORDS|ATTRIBUTES)[A-Z_]*\s*:\s*&\[&str\]\s*=\s*&\[([^\]]*)\]/g)) {
      tables.push(...quoted(m[1]));
    }
  }
  add("keyword", "keyword tables of crates/costate-syntax", tables);
  const grammarRs = read("crates/costate-syntax/src/parser/grammar.rs");
  add(
    "keyword",
    "words matched in crates/costate-syntax/src/parser/grammar.rs",
    [...grammarRs.matchAll(/(?:keyword\(|Tok::Ident\()"([A-Za-z_][A-Za-z0-9_]*)"/g)].map((m) => m[1]),
  );

  const analysis = read("crates/costate-check/src/analysis.rs");
  add("built-in", "crates/costate-check/src/analysis.rs", [...analysis.matchAll(/Builtin::\w+\s*=>\s*"(\w+)"/g)].map((m) => m[1]));
  const settings = read("crates/costate-check/src/settings.rs");
  add("setting", "crates/costate-check/src/settings.rs", [...settings.matchAll(/\bkey:\s*"(\w+)"/g)].map((m) => m[1]));
  add(
    "setting value",
    "crates/costate-check/src/settings.rs",
    [...settings.matchAll(/Choice\(&\[([^\]]*)\]\)/g)].flatMap((m) => quoted(m[1])),
  );
  return words;
}

/** Words in the regexes of a TextMate grammar (match/begin/end/while), not in names or comments. */
export function textMateWords(text) {
  const out = new Set();
  const walk = (node) => {
    if (Array.isArray(node)) {
      node.forEach(walk);
    } else if (node && typeof node === "object") {
      for (const [key, value] of Object.entries(node)) {
        if (["match", "begin", "end", "while"].includes(key) && typeof value === "string") {
          // `\b`, `\s`, `\w` ... are escapes, not letters of a word.
          for (const w of value.replace(/\\[A-Za-z]/g, " ").split(/[^A-Za-z0-9_]+/)) out.add(w);
        } else {
          walk(value);
        }
      }
    }
  };
  walk(JSON.parse(text));
  return out;
}

/** Words of `syntax keyword` lists and `syntax match`/`region` patterns of a Vim syntax file. */
export function vimWords(text) {
  const out = new Set();
  for (const line of text.split("\n")) {
    if (!/^\s*syn(tax)?\s+(keyword|match|region)\b/.test(line)) continue;
    for (const w of line.replace(/\\[A-Za-z]/g, " ").split(/[^A-Za-z0-9_]+/)) out.add(w);
  }
  return out;
}

/** One-word string literals of an Emacs Lisp file, outside comments: the mode's word lists. */
export function emacsWords(text) {
  const code = text
    .split("\n")
    .map((l) => l.replace(/(^|[^\\?]);.*$/, "$1"))
    .join("\n");
  return new Set(quoted(code));
}

/** Problems as lines of text; empty when every grammar has every word. */
export function check(root) {
  const words = languageWords(root);
  const problems = [];
  for (const { file, read } of GRAMMARS) {
    const full = path.join(root, file);
    if (!fs.existsSync(full)) {
      problems.push(`${file}: missing`);
      continue;
    }
    const have = read(fs.readFileSync(full, "utf8"));
    for (const [word, kinds] of words) {
      if (!have.has(word)) {
        problems.push(`${file}: misses \`${word}\`, a ${[...kinds].join(", ")}`);
      }
    }
  }
  return problems;
}

function main() {
  const args = process.argv.slice(2);
  const at = args.indexOf("--root");
  const here = path.dirname(fileURLToPath(import.meta.url));
  const root = path.resolve(at >= 0 ? args[at + 1] : path.join(here, ".."));
  let problems;
  try {
    problems = check(root);
  } catch (e) {
    console.error(`check-grammars: ${e.message}`);
    process.exit(2);
  }
  if (problems.length > 0) {
    console.error(`check-grammars: ${problems.length} word(s) missing from editor grammars:`);
    for (const p of problems) console.error(`  ${p}`);
    process.exit(1);
  }
  const n = languageWords(root).size;
  console.log(`check-grammars: ${GRAMMARS.length} grammars know all ${n} words of the language`);
}

if (process.argv[1] && path.resolve(process.argv[1]) === fileURLToPath(import.meta.url)) {
  main();
}
