//! The protocol handlers. Each one converts positions (UTF-16 to bytes), calls `costate-ide`
//! on the document's analysis snapshot and converts the answer back; state changes (documents,
//! configuration, solves) are the only logic here.

use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex, MutexGuard};

use costate_driver::Overrides;
use costate_ide::{Analysis, CompletionKind, FoldKind, OutlineKind, SolveSummary, TokenType};
use costate_syntax::{Diagnostic, Span};
use serde::Deserialize;
use serde_json::Value;
use tower_lsp_server::jsonrpc::{Error, Result};
use tower_lsp_server::lsp_types::request::WorkDoneProgressCreate;
use tower_lsp_server::lsp_types::*;
use tower_lsp_server::{
    Client, LanguageServer, NotCancellable, OngoingProgress, Unbounded, UriExt,
};

use crate::config::Config;
use crate::convert;
use crate::documents::Documents;
use crate::solving::{self, Outcome};
use crate::summary;

static NEXT_PROGRESS_TOKEN: AtomicU64 = AtomicU64::new(1);

/// The name of the custom request returning the latest solution document of a file.
pub const SOLUTION_REQUEST: &str = "costate/solution";

#[derive(Clone)]
pub struct Backend {
    client: Client,
    state: Arc<Mutex<State>>,
}

#[derive(Default)]
struct State {
    documents: Documents,
    config: Config,
    client: ClientSupport,
    solves: HashMap<Uri, SolveSlot>,
}

/// What the client said it supports, so we never send it a request it would reject.
#[derive(Default, Clone, Copy)]
struct ClientSupport {
    progress: bool,
    /// Shows a diagnostic's related information; if not, the labels go into its message.
    related_information: bool,
    code_lens_refresh: bool,
    inlay_hint_refresh: bool,
}

#[derive(Default)]
struct SolveSlot {
    /// Raised to cancel the running solve; `None` when none runs.
    running: Option<Arc<AtomicBool>>,
    /// Counts saves, so a finished solve that was superseded is dropped.
    generation: u64,
    latest: Option<Arc<SolveResult>>,
}

struct SolveResult {
    document: Value,
    summary: SolveSummary,
    findings: Vec<Diagnostic>,
    /// The text that was solved: findings are shown only while the document still reads so.
    text: String,
}

#[derive(Deserialize)]
pub struct SolutionParams {
    pub uri: String,
}

impl Backend {
    pub fn new(client: Client) -> Backend {
        Backend { client, state: Arc::default() }
    }

    fn state(&self) -> MutexGuard<'_, State> {
        // A handler that panicked cannot leave the documents half-edited in a way that matters
        // more than stopping the server would, so a poisoned lock is taken over.
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// What the server retains: open documents, analyses kept, files with solve state. Each is
    /// bounded by the number of open files, whatever the edit history (the robustness test).
    pub fn footprint(&self) -> (usize, usize, usize) {
        let st = self.state();
        (st.documents.len(), st.documents.analyses(), st.solves.len())
    }

    /// The analysis of the document's current text, computed off the async threads if stale.
    async fn snapshot(&self, uri: &Uri) -> Option<Arc<Analysis>> {
        self.versioned_snapshot(uri).await.map(|(analysis, _)| analysis)
    }

    /// [`Self::snapshot`] with the document version it was made from.
    async fn versioned_snapshot(&self, uri: &Uri) -> Option<(Arc<Analysis>, i32)> {
        let (text, version) = {
            let st = self.state();
            let doc = st.documents.get(uri)?;
            if let Some(a) = doc.fresh_analysis() {
                return Some((a, doc.version));
            }
            (doc.text.clone(), doc.version)
        };
        let analysis =
            Arc::new(tokio::task::spawn_blocking(move || Analysis::new(text)).await.ok()?);
        let mut st = self.state();
        if let Some(doc) = st.documents.get_mut(uri) {
            if doc.version == version {
                doc.analysis = Some(analysis.clone());
                doc.analysis_version = version;
            }
        }
        Some((analysis, version))
    }

    fn latest_solve(&self, uri: &Uri) -> Option<Arc<SolveResult>> {
        self.state().solves.get(uri).and_then(|s| s.latest.clone())
    }

    async fn publish(&self, uri: Uri) {
        let Some((analysis, version)) = self.versioned_snapshot(&uri).await else { return };
        if self.state().documents.get(&uri).is_none_or(|d| d.version != version) {
            return; // edited meanwhile: the publish for the newer version follows
        }
        let related = self.state().client.related_information;
        // A few hundred at most; the last one shown says how many more there are.
        let (listed, omitted) = costate_syntax::shown_diagnostics(&analysis.diagnostics);
        let mut diagnostics: Vec<_> =
            listed.iter().map(|d| convert::diagnostic(&analysis, &uri, d, related)).collect();
        if omitted > 0 {
            if let Some(last) = diagnostics.last_mut() {
                last.message.push_str(&format!("\n(and {omitted} more diagnostics in this file)"));
            }
        }
        if let Some(solve) = self.latest_solve(&uri).filter(|s| s.text == analysis.source) {
            diagnostics.extend(
                solve.findings.iter().map(|d| convert::diagnostic(&analysis, &uri, d, related)),
            );
        }
        self.client.publish_diagnostics(uri, diagnostics, Some(version)).await;
    }

    async fn start_solve(&self, uri: Uri) {
        let (text, overrides, support, cancel, generation) = {
            let mut st = self.state();
            if !st.config.solve_on_save {
                return;
            }
            let Some(doc) = st.documents.get(&uri) else { return };
            let text = doc.text.clone();
            let overrides = Overrides { intervals: st.config.solve_intervals };
            let support = st.client;
            let slot = st.solves.entry(uri.clone()).or_default();
            let cancel = Arc::new(AtomicBool::new(false));
            if let Some(previous) = slot.running.replace(cancel.clone()) {
                previous.store(true, Ordering::Relaxed);
            }
            slot.generation += 1;
            (text, overrides, support, cancel, slot.generation)
        };
        let this = self.clone();
        tokio::spawn(async move {
            this.solve(uri, text, overrides, support, cancel, generation).await;
        });
    }

    async fn solve(
        &self,
        uri: Uri,
        text: String,
        overrides: Overrides,
        support: ClientSupport,
        cancel: Arc<AtomicBool>,
        generation: u64,
    ) {
        let path: Option<PathBuf> = uri.to_file_path().map(|p| p.into_owned());
        let shown = path
            .as_ref()
            .map(|p| p.display().to_string())
            .unwrap_or_else(|| uri.as_str().to_string());
        let progress = if support.progress {
            // Unique across files and saves: the client matches progress reports by token.
            let token = NumberOrString::String(format!(
                "costate-solve-{}",
                NEXT_PROGRESS_TOKEN.fetch_add(1, Ordering::Relaxed)
            ));
            let created = self
                .client
                .send_request::<WorkDoneProgressCreate>(WorkDoneProgressCreateParams {
                    token: token.clone(),
                })
                .await;
            match created {
                Ok(()) => Some(
                    self.client
                        .progress(token, "costate: solving")
                        .with_message(shown.clone())
                        .begin()
                        .await,
                ),
                Err(_) => None,
            }
        } else {
            None
        };
        let (tx, mut rx) = tokio::sync::mpsc::unbounded_channel::<String>();
        let solved_text = text.clone();
        let job = tokio::task::spawn_blocking(move || {
            solving::solve(shown, solved_text, &overrides, cancel, &mut |line| {
                let _ = tx.send(line);
            })
        });
        while let Some(line) = rx.recv().await {
            if let Some(p) = &progress {
                p.report(line).await;
            }
        }
        let outcome =
            job.await.unwrap_or_else(|e| Outcome::Rejected(format!("the solver stopped: {e}")));
        let solved = match outcome {
            Outcome::Invalid => {
                self.clear_running(&uri, generation);
                return finish(progress, "not solved: the file has errors").await;
            }
            Outcome::Cancelled => return finish(progress, "cancelled by a newer save").await,
            Outcome::Rejected(e) => {
                self.clear_running(&uri, generation);
                self.client
                    .show_message(MessageType::ERROR, format!("costate: cannot solve: {e}"))
                    .await;
                return finish(progress, format!("cannot solve: {e}")).await;
            }
            Outcome::Done(solved) => solved,
        };
        if let Some(dir) = path.as_ref().and_then(|p| p.parent()) {
            // As the CLI does: a solved status replaces the solution and its table together;
            // any other ending goes to `NAME.failed.json` and leaves the last good result.
            let names = costate_driver::report::output_names(&solved.problem);
            let json = serde_json::to_string_pretty(&solved.document).unwrap_or_default();
            let written = if solved.document["solved"] == true {
                crate::io::write_all_or_none(&[
                    (dir.join(&names.solution).as_path(), json.as_bytes()),
                    (dir.join(&names.table).as_path(), solved.csv.as_bytes()),
                ])
            } else {
                crate::io::write_atomic(&dir.join(&names.failed), json.as_bytes())
            };
            if let Err(e) = written {
                self.client.show_message(MessageType::WARNING, format!("costate: {e}")).await;
            }
        }
        let summary = summary::from_document(&solved.document);
        let status = summary.status.clone();
        // One line in the client's log per solve, shown whatever the client does with lenses.
        let line = format!(
            "costate: {}: {} · cost {} · {} iterations · {:.2} s",
            solved.problem,
            summary.status,
            costate_driver::report::sig(summary.cost, 6),
            summary.iterations,
            summary.seconds
        );
        let result = Arc::new(SolveResult {
            summary,
            document: solved.document,
            findings: solved.findings,
            text,
        });
        let current = {
            let mut st = self.state();
            match st.solves.get_mut(&uri) {
                Some(slot) if slot.generation == generation => {
                    slot.running = None;
                    slot.latest = Some(result);
                    true
                }
                // Closed, or a newer save started while this one was finishing.
                _ => false,
            }
        };
        if !current {
            return finish(progress, "cancelled by a newer save").await;
        }
        tracing::info!("solved {}: {status}", uri.as_str());
        self.client.log_message(MessageType::INFO, line).await;
        self.publish(uri).await;
        if support.code_lens_refresh {
            let _ = self.client.code_lens_refresh().await;
        }
        if support.inlay_hint_refresh {
            let _ = self.client.inlay_hint_refresh().await;
        }
        finish(progress, status).await;
    }

    fn clear_running(&self, uri: &Uri, generation: u64) {
        if let Some(slot) = self.state().solves.get_mut(uri) {
            if slot.generation == generation {
                slot.running = None;
            }
        }
    }

    /// `costate/solution`: the latest solution document of a file, or null.
    pub async fn solution(&self, params: SolutionParams) -> Result<Option<Value>> {
        let uri: Uri = params
            .uri
            .parse()
            .map_err(|_| Error::invalid_params(format!("`{}` is not a URI", params.uri)))?;
        Ok(self.latest_solve(&uri).map(|s| s.document.clone()))
    }
}

async fn finish(
    progress: Option<OngoingProgress<Unbounded, NotCancellable>>,
    message: impl Into<String>,
) {
    if let Some(p) = progress {
        p.finish_with_message(message.into()).await;
    }
}

fn supports(flag: Option<bool>) -> bool {
    flag.unwrap_or(false)
}

impl LanguageServer for Backend {
    async fn initialize(&self, params: InitializeParams) -> Result<InitializeResult> {
        let caps = &params.capabilities;
        {
            let mut st = self.state();
            st.client = ClientSupport {
                progress: supports(caps.window.as_ref().and_then(|w| w.work_done_progress)),
                related_information: supports(
                    caps.text_document
                        .as_ref()
                        .and_then(|t| t.publish_diagnostics.as_ref())
                        .and_then(|p| p.related_information),
                ),
                code_lens_refresh: supports(
                    caps.workspace
                        .as_ref()
                        .and_then(|w| w.code_lens.as_ref())
                        .and_then(|c| c.refresh_support),
                ),
                inlay_hint_refresh: supports(
                    caps.workspace
                        .as_ref()
                        .and_then(|w| w.inlay_hint.as_ref())
                        .and_then(|c| c.refresh_support),
                ),
            };
            if let Some(options) = &params.initialization_options {
                st.config.update(options);
            }
        }
        let legend = SemanticTokensLegend {
            token_types: costate_ide::TOKEN_TYPES
                .iter()
                .map(|t| SemanticTokenType::new(t))
                .collect(),
            token_modifiers: vec![SemanticTokenModifier::DECLARATION],
        };
        Ok(InitializeResult {
            server_info: Some(ServerInfo {
                name: "costate".into(),
                version: Some(env!("CARGO_PKG_VERSION").into()),
            }),
            capabilities: ServerCapabilities {
                text_document_sync: Some(TextDocumentSyncCapability::Options(
                    TextDocumentSyncOptions {
                        open_close: Some(true),
                        change: Some(TextDocumentSyncKind::INCREMENTAL),
                        save: Some(TextDocumentSyncSaveOptions::SaveOptions(SaveOptions {
                            include_text: Some(false),
                        })),
                        ..Default::default()
                    },
                )),
                hover_provider: Some(HoverProviderCapability::Simple(true)),
                completion_provider: Some(CompletionOptions {
                    trigger_characters: Some(vec!["[".into(), "(".into()]),
                    ..Default::default()
                }),
                signature_help_provider: Some(SignatureHelpOptions {
                    trigger_characters: Some(vec!["(".into(), ",".into()]),
                    ..Default::default()
                }),
                definition_provider: Some(OneOf::Left(true)),
                references_provider: Some(OneOf::Left(true)),
                rename_provider: Some(OneOf::Right(RenameOptions {
                    prepare_provider: Some(true),
                    work_done_progress_options: Default::default(),
                })),
                document_symbol_provider: Some(OneOf::Left(true)),
                document_formatting_provider: Some(OneOf::Left(true)),
                folding_range_provider: Some(FoldingRangeProviderCapability::Simple(true)),
                inlay_hint_provider: Some(OneOf::Left(true)),
                code_lens_provider: Some(CodeLensOptions { resolve_provider: Some(false) }),
                semantic_tokens_provider: Some(
                    SemanticTokensServerCapabilities::SemanticTokensOptions(
                        SemanticTokensOptions {
                            legend,
                            full: Some(SemanticTokensFullOptions::Bool(true)),
                            range: None,
                            work_done_progress_options: Default::default(),
                        },
                    ),
                ),
                ..Default::default()
            },
        })
    }

    async fn shutdown(&self) -> Result<()> {
        for slot in self.state().solves.values() {
            if let Some(cancel) = &slot.running {
                cancel.store(true, Ordering::Relaxed);
            }
        }
        Ok(())
    }

    async fn did_open(&self, params: DidOpenTextDocumentParams) {
        let doc = params.text_document;
        self.state().documents.open(doc.uri.clone(), doc.text, doc.version);
        self.publish(doc.uri).await;
    }

    async fn did_change(&self, params: DidChangeTextDocumentParams) {
        let uri = params.text_document.uri;
        {
            // Applied before any await, so changes apply in the order they arrived.
            let mut st = self.state();
            let Some(doc) = st.documents.get_mut(&uri) else { return };
            for change in params.content_changes {
                doc.apply(change);
            }
            doc.version = params.text_document.version;
        }
        self.publish(uri).await;
    }

    async fn did_save(&self, params: DidSaveTextDocumentParams) {
        // The saved text is the synchronised text (we ask clients not to resend it).
        self.start_solve(params.text_document.uri).await;
    }

    async fn did_close(&self, params: DidCloseTextDocumentParams) {
        let uri = params.text_document.uri;
        let mut st = self.state();
        st.documents.close(&uri);
        if let Some(slot) = st.solves.remove(&uri) {
            if let Some(cancel) = slot.running {
                cancel.store(true, Ordering::Relaxed);
            }
        }
    }

    async fn did_change_configuration(&self, params: DidChangeConfigurationParams) {
        self.state().config.update(&params.settings);
    }

    async fn hover(&self, params: HoverParams) -> Result<Option<Hover>> {
        let p = params.text_document_position_params;
        let Some(a) = self.snapshot(&p.text_document.uri).await else { return Ok(None) };
        let solve = self.latest_solve(&p.text_document.uri);
        let found = costate_ide::hover(
            &a,
            convert::offset(&a, p.position),
            solve.as_ref().map(|s| &s.summary),
        );
        Ok(found.map(|h| Hover {
            contents: HoverContents::Markup(MarkupContent {
                kind: MarkupKind::Markdown,
                value: h.markdown,
            }),
            range: Some(convert::range(&a, h.range)),
        }))
    }

    async fn completion(&self, params: CompletionParams) -> Result<Option<CompletionResponse>> {
        let p = params.text_document_position;
        let Some(a) = self.snapshot(&p.text_document.uri).await else { return Ok(None) };
        let items = costate_ide::completions(&a, convert::offset(&a, p.position))
            .into_iter()
            .map(|c| CompletionItem {
                label: c.label,
                kind: Some(match c.kind {
                    CompletionKind::Keyword => CompletionItemKind::KEYWORD,
                    CompletionKind::Variable => CompletionItemKind::VARIABLE,
                    CompletionKind::Constant => CompletionItemKind::CONSTANT,
                    CompletionKind::Function => CompletionItemKind::FUNCTION,
                    CompletionKind::Setting => CompletionItemKind::PROPERTY,
                    CompletionKind::Value => CompletionItemKind::ENUM_MEMBER,
                    CompletionKind::Unit => CompletionItemKind::UNIT,
                }),
                detail: c.detail,
                documentation: c.documentation.map(Documentation::String),
                ..Default::default()
            })
            .collect();
        Ok(Some(CompletionResponse::Array(items)))
    }

    async fn signature_help(&self, params: SignatureHelpParams) -> Result<Option<SignatureHelp>> {
        let p = params.text_document_position_params;
        let Some(a) = self.snapshot(&p.text_document.uri).await else { return Ok(None) };
        Ok(costate_ide::signature_help(&a, convert::offset(&a, p.position)).map(|s| {
            SignatureHelp {
                signatures: vec![SignatureInformation {
                    label: s.label,
                    documentation: s.documentation.map(Documentation::String),
                    parameters: Some(
                        s.parameters
                            .into_iter()
                            .map(|p| ParameterInformation {
                                label: ParameterLabel::Simple(p),
                                documentation: None,
                            })
                            .collect(),
                    ),
                    active_parameter: None,
                }],
                active_signature: Some(0),
                active_parameter: Some(s.active_parameter as u32),
            }
        }))
    }

    async fn goto_definition(
        &self,
        params: GotoDefinitionParams,
    ) -> Result<Option<GotoDefinitionResponse>> {
        let p = params.text_document_position_params;
        let uri = p.text_document.uri;
        let Some(a) = self.snapshot(&uri).await else { return Ok(None) };
        Ok(costate_ide::definition(&a, convert::offset(&a, p.position)).map(|span| {
            GotoDefinitionResponse::Scalar(Location { uri, range: convert::range(&a, span) })
        }))
    }

    async fn references(&self, params: ReferenceParams) -> Result<Option<Vec<Location>>> {
        let p = params.text_document_position;
        let uri = p.text_document.uri;
        let Some(a) = self.snapshot(&uri).await else { return Ok(None) };
        let spans = costate_ide::references(
            &a,
            convert::offset(&a, p.position),
            params.context.include_declaration,
        );
        Ok(Some(
            spans
                .into_iter()
                .map(|s| Location { uri: uri.clone(), range: convert::range(&a, s) })
                .collect(),
        ))
    }

    async fn prepare_rename(
        &self,
        params: TextDocumentPositionParams,
    ) -> Result<Option<PrepareRenameResponse>> {
        let Some(a) = self.snapshot(&params.text_document.uri).await else { return Ok(None) };
        let offset = convert::offset(&a, params.position);
        // Renaming to the name itself checks everything but the new name.
        let current = a.word_at(offset).map(|w| a.text(w).to_string()).unwrap_or_default();
        match costate_ide::rename(&a, offset, &format!("{current}_")) {
            Ok(_) => {
                Ok(a.word_at(offset).map(|w| PrepareRenameResponse::Range(convert::range(&a, w))))
            }
            Err(e) => Err(Error::invalid_params(e.to_string())),
        }
    }

    async fn rename(&self, params: RenameParams) -> Result<Option<WorkspaceEdit>> {
        let p = params.text_document_position;
        let uri = p.text_document.uri;
        let Some(a) = self.snapshot(&uri).await else { return Ok(None) };
        let spans = costate_ide::rename(&a, convert::offset(&a, p.position), &params.new_name)
            .map_err(|e| Error::invalid_params(e.to_string()))?;
        let edits = spans
            .into_iter()
            .map(|s| TextEdit { range: convert::range(&a, s), new_text: params.new_name.clone() })
            .collect();
        Ok(Some(WorkspaceEdit {
            changes: Some(HashMap::from([(uri, edits)])),
            ..Default::default()
        }))
    }

    async fn document_symbol(
        &self,
        params: DocumentSymbolParams,
    ) -> Result<Option<DocumentSymbolResponse>> {
        let Some(a) = self.snapshot(&params.text_document.uri).await else { return Ok(None) };
        #[allow(deprecated)] // `deprecated` is a required field of the protocol type
        fn convert_symbol(a: &Analysis, s: costate_ide::OutlineSymbol) -> DocumentSymbol {
            DocumentSymbol {
                name: s.name,
                detail: s.detail,
                kind: match s.kind {
                    OutlineKind::Problem => SymbolKind::FILE,
                    OutlineKind::Block => SymbolKind::NAMESPACE,
                    OutlineKind::Constant => SymbolKind::CONSTANT,
                    OutlineKind::Function => SymbolKind::FUNCTION,
                    OutlineKind::Variable => SymbolKind::VARIABLE,
                    OutlineKind::Entry => SymbolKind::FIELD,
                },
                tags: None,
                deprecated: None,
                range: convert::range(a, s.span),
                selection_range: convert::range(a, s.selection),
                children: Some(s.children.into_iter().map(|c| convert_symbol(a, c)).collect()),
            }
        }
        let symbols =
            costate_ide::document_symbols(&a).into_iter().map(|s| convert_symbol(&a, s)).collect();
        Ok(Some(DocumentSymbolResponse::Nested(symbols)))
    }

    async fn formatting(&self, params: DocumentFormattingParams) -> Result<Option<Vec<TextEdit>>> {
        let Some(a) = self.snapshot(&params.text_document.uri).await else { return Ok(None) };
        Ok(costate_ide::format(&a).map(|text| {
            vec![TextEdit {
                range: convert::range(&a, Span::new(0, a.source.len())),
                new_text: text,
            }]
        }))
    }

    async fn folding_range(&self, params: FoldingRangeParams) -> Result<Option<Vec<FoldingRange>>> {
        let Some(a) = self.snapshot(&params.text_document.uri).await else { return Ok(None) };
        Ok(Some(
            costate_ide::folding_ranges(&a)
                .into_iter()
                .map(|f| FoldingRange {
                    start_line: f.start_line,
                    end_line: f.end_line,
                    kind: Some(match f.kind {
                        FoldKind::Region => FoldingRangeKind::Region,
                        FoldKind::Comment => FoldingRangeKind::Comment,
                    }),
                    ..Default::default()
                })
                .collect(),
        ))
    }

    async fn semantic_tokens_full(
        &self,
        params: SemanticTokensParams,
    ) -> Result<Option<SemanticTokensResult>> {
        let Some(a) = self.snapshot(&params.text_document.uri).await else { return Ok(None) };
        let mut data = Vec::new();
        let (mut line, mut col) = (0u32, 0u32);
        for t in costate_ide::semantic_tokens(&a) {
            let start = convert::position(&a, t.span.start);
            let end = convert::position(&a, t.span.end);
            if end.line != start.line {
                continue; // tokens never span lines; skip rather than send a wrong length
            }
            let delta_line = start.line - line;
            let delta_start = if delta_line == 0 { start.character - col } else { start.character };
            data.push(SemanticToken {
                delta_line,
                delta_start,
                length: end.character - start.character,
                token_type: token_index(t.token_type),
                token_modifiers_bitset: u32::from(t.declaration),
            });
            (line, col) = (start.line, start.character);
        }
        Ok(Some(SemanticTokensResult::Tokens(SemanticTokens { result_id: None, data })))
    }

    async fn inlay_hint(&self, params: InlayHintParams) -> Result<Option<Vec<InlayHint>>> {
        let uri = params.text_document.uri;
        let Some(a) = self.snapshot(&uri).await else { return Ok(None) };
        let Some(solve) = self.latest_solve(&uri) else { return Ok(Some(Vec::new())) };
        let range = convert::span(&a, params.range);
        Ok(Some(
            costate_ide::inlay_hints(&a, &solve.summary, range)
                .into_iter()
                .map(|h| InlayHint {
                    position: convert::position(&a, h.offset),
                    label: InlayHintLabel::String(h.label),
                    kind: None,
                    text_edits: None,
                    tooltip: None,
                    padding_left: None,
                    padding_right: None,
                    data: None,
                })
                .collect(),
        ))
    }

    async fn code_lens(&self, params: CodeLensParams) -> Result<Option<Vec<CodeLens>>> {
        let uri = params.text_document.uri;
        let Some(a) = self.snapshot(&uri).await else { return Ok(None) };
        let running = self.state().solves.get(&uri).is_some_and(|s| s.running.is_some());
        let lens = match self.latest_solve(&uri) {
            Some(solve) => costate_ide::problem_lens(&a, &solve.summary).map(|l| {
                let title =
                    if running { format!("{} (solving again…)", l.title) } else { l.title };
                (l.span, title)
            }),
            None if running => a.parse.file.name.as_ref().map(|n| (n.span, "solving…".to_string())),
            None => None,
        };
        Ok(Some(
            lens.into_iter()
                .map(|(span, title)| CodeLens {
                    range: convert::range(&a, span),
                    command: Some(Command { title, command: String::new(), arguments: None }),
                    data: None,
                })
                .collect(),
        ))
    }
}

/// The index of `t` in the legend: `TokenType` is declared in the order of `TOKEN_TYPES`
/// (a test in costate-ide keeps them in step).
fn token_index(t: TokenType) -> u32 {
    t as u32
}
