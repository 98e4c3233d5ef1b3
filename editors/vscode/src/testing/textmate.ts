// Loads the shipped TextMate grammar into the same engine VS Code uses (vscode-textmate with the
// Oniguruma regex library compiled to wasm), so the tests see exactly the tokens an editor would.
// Everything is read from disk: no network at test time.

import * as fs from "node:fs";
import * as path from "node:path";
import * as oniguruma from "vscode-oniguruma";
import * as vsctm from "vscode-textmate";

/** The repository root (`out/test` -> `editors/vscode` -> `editors` -> root). */
export const REPO_ROOT = path.resolve(__dirname, "..", "..", "..", "..");
export const GRAMMAR_PATH = path.resolve(__dirname, "..", "..", "syntaxes", "costate.tmLanguage.json");

export interface Token {
  text: string;
  start: number;
  scopes: string[];
}

export interface TokenizedLine {
  line: string;
  tokens: Token[];
  /** Depth of the rule stack after the line: 1 means no begin/end rule is open. */
  depthAfter: number;
}

let grammarPromise: Promise<vsctm.IGrammar> | undefined;

export function loadGrammar(grammarPath: string = GRAMMAR_PATH): Promise<vsctm.IGrammar> {
  if (grammarPath === GRAMMAR_PATH && grammarPromise) {
    return grammarPromise;
  }
  const promise = createGrammar(grammarPath);
  if (grammarPath === GRAMMAR_PATH) {
    grammarPromise = promise;
  }
  return promise;
}

let wasmLoaded: Promise<void> | undefined;

async function createGrammar(grammarPath: string): Promise<vsctm.IGrammar> {
  if (!wasmLoaded) {
    const wasm = fs.readFileSync(require.resolve("vscode-oniguruma/release/onig.wasm"));
    wasmLoaded = oniguruma.loadWASM(wasm.buffer.slice(wasm.byteOffset, wasm.byteOffset + wasm.byteLength));
  }
  await wasmLoaded;
  const registry = new vsctm.Registry({
    onigLib: Promise.resolve({
      createOnigScanner: (patterns: string[]) => new oniguruma.OnigScanner(patterns),
      createOnigString: (s: string) => new oniguruma.OnigString(s),
    }),
    loadGrammar: async (scopeName: string) => {
      if (scopeName !== "source.costate") {
        return null;
      }
      const text = fs.readFileSync(grammarPath, "utf8");
      return vsctm.parseRawGrammar(text, grammarPath);
    },
  });
  const grammar = await registry.loadGrammar("source.costate");
  if (!grammar) {
    throw new Error(`grammar source.costate not loaded from ${grammarPath}`);
  }
  return grammar;
}

export function tokenize(grammar: vsctm.IGrammar, text: string): TokenizedLine[] {
  let stack = vsctm.INITIAL;
  const out: TokenizedLine[] = [];
  for (const line of text.split(/\r?\n/)) {
    const result = grammar.tokenizeLine(line, stack);
    const tokens = result.tokens.map((t) => ({
      text: line.slice(t.startIndex, t.endIndex),
      start: t.startIndex,
      scopes: t.scopes,
    }));
    stack = result.ruleStack;
    out.push({ line, tokens, depthAfter: stack.depth });
  }
  return out;
}

/** Scopes of the character at `column` of a tokenized line. */
export function scopesAt(line: TokenizedLine, column: number): string[] {
  const token = line.tokens.find((t) => t.start <= column && column < t.start + t.text.length);
  if (!token) {
    throw new Error(`no token at column ${column} of ${JSON.stringify(line.line)}`);
  }
  return token.scopes;
}

/** True when some scope of the list is `scope` or a child of it (`comment` covers `comment.line`). */
export function hasScope(scopes: string[], scope: string): boolean {
  return scopes.some((s) => s === scope || s.startsWith(scope + "."));
}
