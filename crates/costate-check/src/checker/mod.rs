//! The checking pass: declarations, name resolution, types and units, well-posedness.
//!
//! Owns every judgement about a file; writes its findings into an [`Analysis`]. Order of work:
//! built-ins and declarations (duplicates, units), recursion among functions, function bodies
//! (unit-generic), constants (folded lazily, cycles detected), attributes, dynamics, cost,
//! constraints, settings, expectations, and last the whole-file checks (missing dynamics, cost,
//! time; unused controls; non-smooth functions reached from the model).
//!
//! Must not: evaluate anything but constants, know the numeric model, or do IO. The expression
//! rules (what may appear where, how units combine) live in `expr.rs`; declarations in
//! `decls.rs`; relations, settings and expectations in `items.rs`.

mod decls;
mod expr;
mod items;

use std::collections::{HashMap, HashSet};

use costate_syntax::ast::{ConstDecl, File, FnDecl};
use costate_syntax::{Diagnostic, Span};

use crate::analysis::{Analysis, Builtin, Symbol, SymbolId, SymbolKind, Ty, VarAttrs};
use crate::codes;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum ConstState {
    Pending,
    InProgress,
    Done,
}

pub(crate) struct Checker<'a> {
    file: &'a File,
    a: Analysis,
    /// Global names (built-ins included).
    globals: HashMap<String, SymbolId>,
    /// Parameters of each function, by name.
    fn_scopes: HashMap<SymbolId, HashMap<String, SymbolId>>,
    const_decls: HashMap<SymbolId, &'a ConstDecl>,
    const_state: HashMap<SymbolId, ConstState>,
    const_types: HashMap<SymbolId, Ty>,
    cycle_reported: HashSet<SymbolId>,
    fn_decls: HashMap<SymbolId, &'a FnDecl>,
    /// Functions on a call cycle: never expanded.
    recursive: HashSet<SymbolId>,
    /// Direct callees of each function.
    calls: HashMap<SymbolId, Vec<SymbolId>>,
    /// False while a function body is re-checked for one call: nothing is recorded then and
    /// only unit findings are kept (re-worded at the call).
    recording: bool,
    expansions: usize,
    /// Definitions (constants being folded, function bodies being expanded) open at this
    /// moment, and expressions being checked, across all of them: both bound the stack.
    nesting: usize,
    expr_depth: usize,
    too_deep_reported: bool,
    /// Diagnostics raised while checking a constant on demand from inside a call expansion.
    deferred: Vec<Diagnostic>,
    /// (code id, primary span) of every diagnostic recorded, to drop repeats from expansions.
    seen: HashSet<(&'static str, Span)>,
    used_controls: HashSet<SymbolId>,
    /// Functions called from dynamics, cost or constraints.
    model_fns: HashSet<SymbolId>,
    /// `abs`/`min`/`max` calls inside function bodies: (fn, span, name).
    fn_nonsmooth: Vec<(SymbolId, Span, &'static str)>,
    /// Where whole-file findings are reported: the problem name, else the file start.
    anchor: Span,
}

/// Checks one parsed file. Never panics; every finding is a diagnostic in the result.
pub fn check(file: &File) -> Analysis {
    let anchor = file.name.as_ref().map_or(Span::new(file.span.start, file.span.start), |n| n.span);
    let mut c = Checker {
        file,
        a: Analysis::default(),
        globals: HashMap::new(),
        fn_scopes: HashMap::new(),
        const_decls: HashMap::new(),
        const_state: HashMap::new(),
        const_types: HashMap::new(),
        cycle_reported: HashSet::new(),
        fn_decls: HashMap::new(),
        recursive: HashSet::new(),
        calls: HashMap::new(),
        recording: true,
        expansions: 0,
        nesting: 0,
        expr_depth: 0,
        too_deep_reported: false,
        deferred: Vec::new(),
        seen: HashSet::new(),
        used_controls: HashSet::new(),
        model_fns: HashSet::new(),
        fn_nonsmooth: Vec::new(),
        anchor,
    };
    c.add_builtins();
    c.collect_declarations();
    c.find_recursion();
    c.check_fn_bodies();
    c.check_consts();
    c.check_var_attrs();
    c.check_dynamics();
    c.check_cost();
    c.check_constraints();
    c.check_settings();
    c.check_expectations();
    c.whole_file_checks();
    let mut a = c.a;
    a.diagnostics.append(&mut c.deferred);
    a.diagnostics.sort_by_key(|d| (d.primary.span.start, d.primary.span.end));
    a
}

impl<'a> Checker<'a> {
    /// Records a diagnostic (or, during a call expansion, collects it for re-wording).
    fn push(&mut self, d: Diagnostic) {
        if self.recording {
            self.seen.insert((d.code.id, d.primary.span));
        }
        self.a.diagnostics.push(d);
    }

    fn add_symbol(&mut self, mut s: Symbol) -> SymbolId {
        let id = SymbolId(self.a.symbols.len() as u32);
        s.id = id;
        self.a.symbols.push(s);
        id
    }

    fn sym(&self, id: SymbolId) -> &Symbol {
        self.a.symbol(id)
    }

    fn add_builtins(&mut self) {
        for b in Builtin::ALL {
            let id = self.add_symbol(Symbol {
                id: SymbolId(0),
                name: b.name().to_string(),
                kind: SymbolKind::Builtin,
                name_span: Span::default(),
                decl_span: Span::default(),
                doc: Some(b.doc().to_string()),
                unit: None,
                dimension: None,
                value: (b == Builtin::Pi).then_some(std::f64::consts::PI),
                index: b as usize,
                attrs: VarAttrs::default(),
                builtin: Some(b),
                params: Vec::new(),
                body: None,
                owner: None,
            });
            self.globals.insert(b.name().to_string(), id);
        }
    }

    /// The type a variable symbol (time, state, control, param) contributes.
    fn var_ty(&self, id: SymbolId) -> Ty {
        self.sym(id).unit.as_ref().map_or(Ty::Unknown, Ty::known)
    }

    fn time_ty(&self) -> Ty {
        self.a.time.map_or(Ty::Unknown, |t| self.var_ty(t))
    }

    fn whole_file_checks(&mut self) {
        // States without an equation.
        let with_eq: HashSet<SymbolId> = self.a.dynamics.iter().map(|d| d.state).collect();
        for &s in &self.a.states.clone() {
            if !with_eq.contains(&s) {
                let sym = self.sym(s);
                let d = Diagnostic::new(
                    codes::MISSING_DYNAMICS,
                    format!("state `{}` has no dynamics", sym.name),
                    sym.name_span,
                    "declared here without an equation",
                )
                .with_help(format!("add `{}' = ...` to a `dynamics` block", sym.name));
                self.push(d);
            }
        }
        if self.a.cost.is_none() && !self.cost_seen() {
            let d = Diagnostic::new(
                codes::MISSING_COST,
                "the problem has no cost",
                self.anchor,
                "nothing to optimise",
            )
            .with_help("add `cost { minimize ... }` or `cost { maximize ... }`");
            self.push(d);
        }
        if self.a.time.is_none() {
            let d = Diagnostic::new(
                codes::MISSING_TIME,
                "the problem has no independent variable",
                self.anchor,
                "no `time` declaration",
            )
            .with_help("declare one, e.g. `time t [s]: start 0, end 10`");
            self.push(d);
        }
        for &u in &self.a.controls.clone() {
            if !self.used_controls.contains(&u) {
                let sym = self.sym(u);
                let d = Diagnostic::new(
                    codes::UNUSED_CONTROL,
                    format!("control `{}` never influences the problem", sym.name),
                    sym.name_span,
                    "not used in dynamics, cost or constraints",
                )
                .with_help("use it in the dynamics, the cost or a constraint, or remove it");
                self.push(d);
            }
        }
        // Non-smooth calls inside functions that the model reaches.
        let mut reached: HashSet<SymbolId> = HashSet::new();
        let mut todo: Vec<SymbolId> = self.model_fns.iter().copied().collect();
        while let Some(f) = todo.pop() {
            if reached.insert(f) {
                todo.extend(self.calls.get(&f).into_iter().flatten().copied());
            }
        }
        let mut found: Vec<(SymbolId, Span, &'static str)> =
            self.fn_nonsmooth.iter().copied().filter(|(f, _, _)| reached.contains(f)).collect();
        found.sort_by_key(|(_, s, _)| *s);
        found.dedup_by_key(|(_, s, _)| *s);
        for (f, span, name) in found {
            let fname = self.sym(f).name.clone();
            let d = expr::non_smooth_diagnostic(name, span)
                .with_note(format!("`{fname}` is used in the dynamics, the cost or a constraint"));
            self.push(d);
        }
    }

    fn cost_seen(&self) -> bool {
        self.file
            .items
            .iter()
            .any(|i| matches!(i, costate_syntax::ast::Item::Cost(b) if !b.entries.is_empty()))
    }
}
