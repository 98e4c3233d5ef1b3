// The "costate: Show Solution Plots" webviews: one panel per problem file, filled from the
// server's `costate/solution` answer and refreshed after each save of that file.
//
// The panel runs no script at all (enableScripts is off and the page's CSP forbids everything
// but its one nonce'd style), so a refresh replaces the whole page; the drawing is done in
// plot.ts, which knows nothing of VS Code.

import * as crypto from "node:crypto";
import * as path from "node:path";
import * as vscode from "vscode";
import type { LanguageClient } from "vscode-languageclient/node";
import { readSolution, renderMessagePage, renderSolutionPage } from "./plot";
import { fingerprint, pollForChange, retryDelays } from "./refresh";

/** The custom request the costate server answers with the solution document (or null). */
export const SOLUTION_REQUEST = "costate/solution";

interface Panel {
  webview: vscode.WebviewPanel;
  uri: vscode.Uri;
  /** The document on screen (null: none yet), redrawn with a notice while waiting. */
  doc: unknown;
  /** Fingerprint of `doc`, to tell a new solution from the old one. */
  shown: string;
  /** Bumped by each save and by disposal: a poll started earlier sees it and stops. */
  generation: number;
}

function nonce(): string {
  return crypto.randomBytes(18).toString("base64");
}

function sleep(ms: number): Promise<void> {
  return new Promise((resolve) => setTimeout(resolve, ms));
}

export class SolutionPanels implements vscode.Disposable {
  private readonly panels = new Map<string, Panel>();

  constructor(private readonly client: () => LanguageClient | undefined) {}

  /** Opens (or reveals) the plots of `uri` and draws the current solution. */
  async show(uri: vscode.Uri): Promise<void> {
    const key = uri.toString();
    let panel = this.panels.get(key);
    if (panel) {
      panel.webview.reveal(undefined, true);
    } else {
      const webview = vscode.window.createWebviewPanel(
        "costate.solution",
        `Solution: ${path.basename(uri.path)}`,
        { viewColumn: vscode.ViewColumn.Beside, preserveFocus: true },
        // No scripts and no local resources: the page is self-contained HTML and SVG.
        { enableScripts: false, localResourceRoots: [] },
      );
      const created: Panel = { webview, uri, doc: null, shown: fingerprint(null), generation: 0 };
      panel = created;
      this.panels.set(key, created);
      webview.onDidDispose(() => {
        created.generation++;
        this.panels.delete(key);
      });
    }
    const generation = ++panel.generation;
    const first = await this.request(panel);
    if (generation !== panel.generation) {
      return;
    }
    if (first.kind === "error") {
      this.message(panel, first.message);
      return;
    }
    this.draw(panel, first.doc);
    if (first.doc === null) {
      // A save just before the panel opened may still be solving: ask quietly for a few seconds.
      // Later saves start their own poll.
      await this.poll(panel, generation, "", [500, 1000, 2000, 3000, 3000]);
    }
  }

  /** After a save the server solves again; ask until its answer changes. */
  async saved(uri: vscode.Uri): Promise<void> {
    const panel = this.panels.get(uri.toString());
    if (!panel) {
      return;
    }
    if (!vscode.workspace.getConfiguration("costate", uri).get<boolean>("solveOnSave", true)) {
      return;
    }
    const generation = ++panel.generation;
    await this.poll(panel, generation, "Waiting for the solve that follows the save…", retryDelays());
  }

  dispose(): void {
    for (const panel of [...this.panels.values()]) {
      panel.webview.dispose();
    }
  }

  private async poll(panel: Panel, generation: number, notice: string, delays: number[]): Promise<void> {
    // Compare with what is on screen rather than fetching a baseline first: a small problem may
    // already be solved again by the time the first request goes out.
    const baseline = panel.shown;
    if (notice) {
      this.draw(panel, panel.doc, notice);
    }
    const result = await pollForChange<unknown>({
      fetch: async () => {
        const answer = await this.request(panel);
        if (answer.kind === "error") {
          throw new Error(answer.message);
        }
        return answer.doc;
      },
      isNew: (value) => value !== null && fingerprint(value) !== baseline,
      delays,
      sleep,
      cancelled: () => generation !== panel.generation,
    });
    if (result.kind === "new") {
      this.draw(panel, result.value);
    } else if (result.kind === "unchanged" && notice) {
      // Drop the waiting notice; the last solution (if any) stays on screen.
      const after = panel.doc === null ? "" : "No new solution arrived after the last save (a file with errors is not solved; see Problems).";
      this.draw(panel, panel.doc, after);
    }
  }

  private async request(panel: Panel): Promise<{ kind: "ok"; doc: unknown } | { kind: "error"; message: string }> {
    const client = this.client();
    if (!client || !client.isRunning()) {
      return {
        kind: "error",
        message: "The costate language server is not running. Check the 'costate' output channel and the setting costate.server.path, then run 'costate: Restart Language Server'.",
      };
    }
    try {
      // The server knows the document by the URI string the client sent in didOpen.
      const uri = client.code2ProtocolConverter.asUri(panel.uri);
      const doc = await client.sendRequest<unknown>(SOLUTION_REQUEST, { uri });
      return { kind: "ok", doc: doc ?? null };
    } catch (e) {
      const detail = e instanceof Error ? e.message : String(e);
      return { kind: "error", message: `The server did not answer ${SOLUTION_REQUEST}: ${detail}` };
    }
  }

  private draw(panel: Panel, doc: unknown, notice = ""): void {
    const name = path.basename(panel.uri.path);
    panel.doc = doc ?? null;
    panel.shown = fingerprint(panel.doc);
    if (doc === null || doc === undefined) {
      const solveOnSave = vscode.workspace.getConfiguration("costate", panel.uri).get<boolean>("solveOnSave", true);
      const hint = solveOnSave
        ? "Save the file to solve it; the plots appear when the solve finishes. A file with errors is not solved (see Problems)."
        : "costate.solveOnSave is off: turn it on to solve on save, or solve from a terminal with `costate solve`.";
      panel.webview.webview.html = renderMessagePage(`No solution yet for ${name}`, hint, { nonce: nonce(), notice });
      return;
    }
    const read = readSolution(doc);
    if (!read.ok) {
      panel.webview.webview.html = renderMessagePage(`Cannot show the solution of ${name}`, read.reason, { nonce: nonce(), notice });
      return;
    }
    panel.webview.webview.html = renderSolutionPage(read.solution, { nonce: nonce(), notice });
  }

  /** Shows an error without forgetting what was on screen. */
  private message(panel: Panel, text: string): void {
    panel.webview.webview.html = renderMessagePage(`costate: ${path.basename(panel.uri.path)}`, text, { nonce: nonce() });
  }
}
