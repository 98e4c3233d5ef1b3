// Entry point of the costate extension: starts `costate lsp` over stdio and wires the commands.
// Everything the language knows (diagnostics, hover, completion, solving) lives in the server;
// this side only launches it, forwards the `costate` settings and draws solutions.

import * as os from "node:os";
import * as vscode from "vscode";
import { LanguageClient, LanguageClientOptions, ServerOptions, TransportKind } from "vscode-languageclient/node";
import { SolutionPanels } from "./solutionPanel";

const SECTION = "costate";
let client: LanguageClient | undefined;

/** `costate.server.path` with `~` and `${workspaceFolder}` expanded; a bare name is looked up on PATH. */
export function serverCommand(): string {
  const configured = vscode.workspace.getConfiguration(SECTION).get<string>("server.path", "costate").trim() || "costate";
  const folder = vscode.workspace.workspaceFolders?.[0]?.uri.fsPath ?? "";
  return configured.replace(/^~(?=$|[\\/])/, os.homedir()).replace(/\$\{workspaceFolder\}/g, folder);
}

/** The settings the server reads, also sent at initialisation so the first solve honours them
 * before any `workspace/didChangeConfiguration` arrives. */
function serverSettings(): { solveOnSave: boolean; solveIntervals: number | null } {
  const config = vscode.workspace.getConfiguration(SECTION);
  const intervals = config.get<number | null>("solveIntervals", null);
  return {
    solveOnSave: config.get<boolean>("solveOnSave", true),
    solveIntervals: typeof intervals === "number" && Number.isInteger(intervals) && intervals >= 1 ? intervals : null,
  };
}

function createClient(output: vscode.OutputChannel): LanguageClient {
  const command = serverCommand();
  const serverOptions: ServerOptions = { command, args: ["lsp"], transport: TransportKind.stdio };
  const clientOptions: LanguageClientOptions = {
    documentSelector: [
      { scheme: "file", language: "costate" },
      { scheme: "untitled", language: "costate" },
    ],
    // Pushes the whole `costate` section with workspace/didChangeConfiguration at start and on
    // every change; servers that pull with workspace/configuration get the same values.
    synchronize: { configurationSection: SECTION },
    initializationOptions: serverSettings(),
    outputChannel: output,
  };
  return new LanguageClient("costate", "costate language server", serverOptions, clientOptions);
}

async function startClient(output: vscode.OutputChannel): Promise<void> {
  client = createClient(output);
  try {
    await client.start();
  } catch (e) {
    const detail = e instanceof Error ? e.message : String(e);
    output.appendLine(`could not start '${serverCommand()} lsp': ${detail}`);
    // Not awaited: activation must not hang until the user dismisses the message.
    void reportStartFailure(output, detail);
  }
}

async function reportStartFailure(output: vscode.OutputChannel, detail: string): Promise<void> {
  const choice = await vscode.window.showErrorMessage(
    `costate: could not start the language server '${serverCommand()} lsp' (${detail}). Is costate installed, or is costate.server.path set?`,
    "Open Settings",
    "Show Output",
  );
  if (choice === "Open Settings") {
    await vscode.commands.executeCommand("workbench.action.openSettings", "costate.server.path");
  } else if (choice === "Show Output") {
    output.show(true);
  }
}

async function restartClient(output: vscode.OutputChannel): Promise<void> {
  const old = client;
  client = undefined;
  if (old) {
    try {
      await old.stop();
    } catch {
      // A server that never started cannot be stopped; starting a new one is what matters.
    }
  }
  await startClient(output);
}

export async function activate(context: vscode.ExtensionContext): Promise<void> {
  const output = vscode.window.createOutputChannel("costate");
  const panels = new SolutionPanels(() => client);
  context.subscriptions.push(
    output,
    panels,
    vscode.commands.registerCommand("costate.showSolution", async (arg?: unknown) => {
      // The editor title menu passes the file's Uri; a server code lens may pass a URI string;
      // from the palette there is no argument and the active editor decides.
      const given = arg instanceof vscode.Uri ? arg : typeof arg === "string" ? vscode.Uri.parse(arg) : undefined;
      const document = vscode.window.activeTextEditor?.document;
      const target = given ?? (document?.languageId === "costate" ? document.uri : undefined);
      if (!target) {
        await vscode.window.showInformationMessage("costate: open a .costate file to show its solution.");
        return;
      }
      await panels.show(target);
    }),
    vscode.commands.registerCommand("costate.restartServer", () => restartClient(output)),
    vscode.workspace.onDidSaveTextDocument((document) => {
      if (document.languageId === "costate") {
        void panels.saved(document.uri);
      }
    }),
    vscode.workspace.onDidChangeConfiguration(async (event) => {
      // Other settings reach the running server by themselves; a new binary needs a restart.
      if (event.affectsConfiguration("costate.server.path")) {
        const choice = await vscode.window.showInformationMessage(
          "costate.server.path changed. Restart the costate language server now?",
          "Restart",
        );
        if (choice === "Restart") {
          await restartClient(output);
        }
      }
    }),
  );
  await startClient(output);
}

export async function deactivate(): Promise<void> {
  if (client) {
    await client.stop();
  }
}
