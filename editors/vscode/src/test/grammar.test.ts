// The TextMate grammar, run through the engine VS Code uses, over every example and reference
// problem in the repository and over small cases for the contextual rules. The expected scopes
// come from an independent reading of each line (the lexer's rules for numbers, comments and
// units; block context from `keyword {` ... `}`), not from the grammar's own regexes.

import { test } from "node:test";
import * as assert from "node:assert/strict";
import * as fs from "node:fs";
import * as path from "node:path";
import { REPO_ROOT, TokenizedLine, hasScope, loadGrammar, scopesAt, tokenize } from "../testing/textmate";

const ITEM_LINE = /^\s*(problem|fn|time)\s+[A-Za-z_]/;
const ITEM_BLOCK = /^\s*(const|param|state|control|dynamics|cost|path|boundary|solve|expect)\s*\{/;
const ATTRIBUTES = /\b(start|end|in|guess|scale|free)\b/g;
const BUILTIN_CALL =
  /\b(sin|cos|tan|asin|acos|atan|atan2|sinh|cosh|tanh|exp|log|sqrt|abs|min|max|start|end|integral)\s*\(/g;
/** The lexer's number: digits, an optional fraction that is not a range `..`, an exponent; it
 * may follow a range `..` but not a lone `.` (`.5` is invalid). */
const NUMBER = /(?<![A-Za-z0-9_]|(?<!\.)\.)\d+(?:\.\d+)?(?:[eE][+-]?\d+)?(?![A-Za-z0-9_])/g;
const UNIT = /\[[^\]]*\]/g;

function costateFiles(dir: string): string[] {
  const full = path.join(REPO_ROOT, dir);
  if (!fs.existsSync(full)) {
    return [];
  }
  return fs
    .readdirSync(full)
    .filter((f) => f.endsWith(".costate"))
    .sort()
    .map((f) => path.join(full, f));
}

const EXAMPLES = costateFiles("examples");
// Valid problems written by others for the solver and checker tests: more shapes of the language
// for the same checks. Error fixtures are left out on purpose (they are invalid by design).
const VALID_FIXTURES = [
  ...costateFiles("tests/fixtures/references"),
  ...costateFiles("crates/costate-check/tests/fixtures/ok"),
];

interface Counts {
  comments: number;
  docComments: number;
  numbers: number;
  units: number;
  itemKeywords: number;
  attributes: number;
  builtins: number;
  senses: number;
  within: number;
}

function expectScopeOver(line: TokenizedLine, from: number, to: number, scope: string, what: string, where: string) {
  for (let col = from; col < to; col++) {
    const scopes = scopesAt(line, col);
    assert.ok(
      hasScope(scopes, scope),
      `${where}: ${what} ${JSON.stringify(line.line.slice(from, to))} at column ${col + 1} has scopes ${scopes.join(" ")}, expected ${scope}\n  line: ${line.line}`,
    );
  }
}

function checkFile(lines: TokenizedLine[], file: string, counts: Counts) {
  let block: string | null = null;
  lines.forEach((line, i) => {
    const where = `${path.relative(REPO_ROOT, file)}:${i + 1}`;
    const text = line.line;
    const commentAt = text.indexOf("//");
    const code = commentAt >= 0 ? text.slice(0, commentAt) : text;

    if (commentAt >= 0) {
      const doc = /^\s*\/\/\/(?!\/)/.test(text);
      const scope = doc ? "comment.line.documentation.costate" : "comment.line.double-slash.costate";
      expectScopeOver(line, commentAt, text.length, scope, "comment", where);
      if (doc) counts.docComments++;
      else counts.comments++;
    }

    // Examples are valid files: nothing in them may look like an error to the grammar.
    for (let col = 0; col < code.length; col++) {
      const scopes = scopesAt(line, col);
      assert.ok(!hasScope(scopes, "invalid"), `${where}: column ${col + 1} scoped invalid: ${scopes.join(" ")}\n  line: ${text}`);
    }

    for (const m of code.matchAll(NUMBER)) {
      expectScopeOver(line, m.index!, m.index! + m[0].length, "constant.numeric.costate", "number", where);
      counts.numbers++;
    }

    for (const m of code.matchAll(UNIT)) {
      const start = m.index!;
      const end = start + m[0].length;
      expectScopeOver(line, start, end, "meta.unit.costate", "unit", where);
      expectScopeOver(line, start, start + 1, "punctuation.definition.unit.begin.costate", "unit bracket", where);
      expectScopeOver(line, end - 1, end, "punctuation.definition.unit.end.costate", "unit bracket", where);
      for (const name of m[0].matchAll(/[A-Za-z_]\w*/g)) {
        const at = start + name.index!;
        expectScopeOver(line, at, at + name[0].length, "support.type.unit.costate", "unit name", where);
      }
      counts.units++;
    }

    const itemLine = ITEM_LINE.exec(code);
    const itemBlock = ITEM_BLOCK.exec(code);
    const item = itemLine ?? itemBlock;
    if (item) {
      const at = code.indexOf(item[1]);
      expectScopeOver(line, at, at + item[1].length, "keyword.other.item.costate", "item keyword", where);
      counts.itemKeywords++;
      block = itemBlock && !/\}/.test(code.slice(itemBlock[0].length)) ? itemBlock[1] : null;
    }

    for (const m of code.matchAll(BUILTIN_CALL)) {
      expectScopeOver(line, m.index!, m.index! + m[1].length, "support.function.builtin.costate", "built-in", where);
      counts.builtins++;
    }

    const declares = (itemLine && itemLine[1] === "time") || (block !== null && ["state", "control", "param"].includes(block));
    if (declares) {
      for (const m of code.matchAll(ATTRIBUTES)) {
        if (/^\s*\(/.test(code.slice(m.index! + m[0].length))) continue;
        if (m.index! < (itemBlock ? itemBlock[0].length : 0)) continue;
        // The declared name itself may be spelt like an attribute word only at the line start.
        if (/^\s*$/.test(code.slice(0, m.index!))) continue;
        expectScopeOver(line, m.index!, m.index! + m[0].length, "keyword.other.attribute.costate", "attribute", where);
        counts.attributes++;
      }
    }
    if (block === "cost") {
      for (const m of code.matchAll(/\b(minimize|maximize)\b/g)) {
        expectScopeOver(line, m.index!, m.index! + m[0].length, "keyword.other.sense.costate", "sense", where);
        counts.senses++;
      }
    }
    if (block === "expect") {
      for (const m of code.matchAll(/\bwithin\b/g)) {
        expectScopeOver(line, m.index!, m.index! + m[0].length, "keyword.other.within.costate", "within", where);
        counts.within++;
      }
    }

    if (/^\s*\}/.test(code)) {
      block = null;
      assert.equal(line.depthAfter, 1, `${where}: a begin/end rule is still open after the closing brace`);
    }
  });
  const last = lines[lines.length - 1];
  assert.equal(last.depthAfter, 1, `${path.relative(REPO_ROOT, file)}: a begin/end rule is still open at the end of the file`);
}

function emptyCounts(): Counts {
  return { comments: 0, docComments: 0, numbers: 0, units: 0, itemKeywords: 0, attributes: 0, builtins: 0, senses: 0, within: 0 };
}

test("every example is tokenized with the expected scopes and closes every rule", async () => {
  const grammar = await loadGrammar();
  assert.ok(EXAMPLES.length >= 3, `expected the examples/*.costate files, found ${EXAMPLES.length}`);
  const counts = emptyCounts();
  for (const file of EXAMPLES) {
    checkFile(tokenize(grammar, fs.readFileSync(file, "utf8")), file, counts);
  }
  // Guards against an oracle that silently matches nothing: the examples use every kind.
  for (const [kind, n] of Object.entries(counts)) {
    assert.ok(n > 0, `no ${kind} were checked in the examples`);
  }
});

test("valid checker and reference fixtures get the same scopes", async () => {
  const grammar = await loadGrammar();
  const counts = emptyCounts();
  for (const file of VALID_FIXTURES) {
    checkFile(tokenize(grammar, fs.readFileSync(file, "utf8")), file, counts);
  }
});

async function lines(source: string): Promise<TokenizedLine[]> {
  return tokenize(await loadGrammar(), source);
}

/** Scopes of the first occurrence of `fragment` (after `after`, if given) on line `row`. */
function scopesOf(ls: TokenizedLine[], row: number, fragment: string, after = 0): string[] {
  const col = ls[row].line.indexOf(fragment, after);
  assert.ok(col >= 0, `${fragment} not on line ${row}: ${ls[row].line}`);
  return scopesAt(ls[row], col);
}

test("a doc comment is a `///` line on its own; after code or with four slashes it is a comment", async () => {
  const ls = await lines("/// documented\nx = 1 /// trailing\n//// banner\n  /// indented");
  assert.ok(hasScope(scopesOf(ls, 0, "documented"), "comment.line.documentation.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "trailing"), "comment.line.double-slash.costate"));
  assert.ok(!hasScope(scopesOf(ls, 1, "trailing"), "comment.line.documentation"));
  assert.ok(hasScope(scopesOf(ls, 2, "banner"), "comment.line.double-slash.costate"));
  assert.ok(hasScope(scopesOf(ls, 3, "indented"), "comment.line.documentation.costate"));
});

test("numbers, ranges and invalid numbers follow the lexer", async () => {
  const ls = await lines("state {\n  v: in 1..60, guess 2.5E+4\n  w: start 1e-3, end 1.2.3\n}");
  assert.ok(hasScope(scopesOf(ls, 1, "1"), "constant.numeric.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, ".."), "keyword.operator.range.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "60"), "constant.numeric.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "E+4"), "constant.numeric.costate"));
  assert.ok(hasScope(scopesOf(ls, 2, "-3"), "constant.numeric.costate"));
  assert.ok(hasScope(scopesOf(ls, 2, "1.2.3"), "invalid.illegal.number.costate"));
  const invalid = await lines("const {\n  a = .5\n  b = 2x\n  c = 1.\n}");
  for (const [row, text] of [[1, ".5"], [2, "2x"], [3, "1."]] as const) {
    for (let col = invalid[row].line.indexOf(text); col < invalid[row].line.indexOf(text) + text.length; col++) {
      assert.ok(hasScope(scopesAt(invalid[row], col), "invalid.illegal.number.costate"), `${text} column ${col}`);
    }
  }
});

test("attribute words are keywords in declarations, built-ins before `(`, and names elsewhere", async () => {
  const ls = await lines(
    [
      "state {",
      "  end_x [m]: start 0, end free",
      "}",
      "cost {",
      "  minimize end(end_x) + integral(start)",
      "}",
      "expect {",
      "  cost == 3 within 5%",
      "}",
    ].join("\n"),
  );
  assert.ok(hasScope(scopesOf(ls, 1, "end_x"), "variable.other.definition.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "start"), "keyword.other.attribute.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "free"), "keyword.other.attribute.costate"));
  assert.ok(hasScope(scopesOf(ls, 4, "minimize"), "keyword.other.sense.costate"));
  assert.ok(hasScope(scopesOf(ls, 4, "end("), "support.function.builtin.costate"));
  // `start` as an argument is a name: attributes are not keywords in a cost.
  const start = scopesOf(ls, 4, "start");
  assert.ok(!hasScope(start, "keyword") && hasScope(start, "variable.other.costate"), start.join(" "));
  assert.ok(hasScope(scopesOf(ls, 7, "cost"), "variable.language.cost.costate"));
  assert.ok(hasScope(scopesOf(ls, 7, "within"), "keyword.other.within.costate"));
  assert.ok(hasScope(scopesOf(ls, 7, "%"), "keyword.other.percent.costate"));
  // `minimize` outside a cost block is an ordinary name.
  const outside = await lines("path {\n  minimize <= 3\n}");
  assert.ok(!hasScope(scopesOf(outside, 1, "minimize"), "keyword"));
});

test("item words are keywords only where an item starts", async () => {
  const ls = await lines("dynamics {\n  cost' = state * time\n  path' = 1\n}\ntime t [s]: start 0, end 1");
  for (const word of ["cost", "state", "time"]) {
    assert.ok(!hasScope(scopesOf(ls, 1, word), "keyword.other.item"), word);
  }
  assert.ok(hasScope(scopesOf(ls, 1, "cost"), "variable.other.state.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "'"), "keyword.operator.derivative.costate"));
  assert.ok(hasScope(scopesOf(ls, 4, "time"), "keyword.other.item.costate"));
  assert.ok(hasScope(scopesOf(ls, 4, "end"), "keyword.other.attribute.costate"));
});

test("a one-line block declares its name and closes", async () => {
  const ls = await lines("control { u }\nstate { x; y [m] }");
  assert.ok(hasScope(scopesOf(ls, 0, "u"), "variable.other.definition.costate"));
  assert.equal(ls[0].depthAfter, 1);
  assert.ok(hasScope(scopesOf(ls, 1, "x"), "variable.other.definition.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "y"), "variable.other.definition.costate"));
  assert.equal(ls[1].depthAfter, 1);
});

test("an open unit bracket ends with its line and a missing `}` ends at the next item", async () => {
  const ls = await lines("const {\n  g = 9.81 [m/s^2\n  h = 2\n\nstate {\n  x: start 0\n}\ncost {\n  minimize end(x)\n}");
  assert.ok(hasScope(scopesOf(ls, 1, "m/s"), "meta.unit.costate"));
  assert.ok(!hasScope(scopesOf(ls, 2, "h"), "meta.unit"), "the unit spilled onto the next line");
  assert.ok(hasScope(scopesOf(ls, 2, "h"), "variable.other.constant.definition.costate"));
  // The const block was never closed: the state block still starts, as the parser recovers.
  assert.ok(hasScope(scopesOf(ls, 4, "state"), "keyword.other.item.costate"));
  assert.ok(!hasScope(scopesOf(ls, 4, "state"), "meta.block.const"));
  assert.ok(hasScope(scopesOf(ls, 5, "start"), "keyword.other.attribute.costate"));
  assert.equal(ls[ls.length - 1].depthAfter, 1);
});

test("settings keys and values in solve", async () => {
  const ls = await lines("solve {\n  integrator = radau\n  intervals = 40\n}");
  assert.ok(hasScope(scopesOf(ls, 1, "integrator"), "support.variable.setting.costate"));
  assert.ok(hasScope(scopesOf(ls, 1, "radau"), "support.constant.setting.costate"));
  assert.ok(hasScope(scopesOf(ls, 2, "40"), "constant.numeric.costate"));
});
