//! Declarations: the symbol table, units of declarations, recursion among functions, constant
//! folding on demand, and the attributes of the independent variable, states, controls and
//! parameters.

use std::collections::{HashMap, HashSet};

use costate_syntax::ast::{
    Attr, AttrKind, AttrValue, Expr, ExprKind, Ident, Item, Range, UnitExpr, VarDecl,
};
use costate_syntax::{closest_name, Diagnostic, Span};

use super::expr::{Cx, Place};
use super::{Checker, ConstState};
use crate::analysis::{Endpoint, Interval, Symbol, SymbolId, SymbolKind, Ty, VarAttrs};
use crate::codes;
use crate::units::{self, Unit};

/// Which attributes each kind takes.
fn allowed(kind: SymbolKind) -> &'static [AttrKind] {
    match kind {
        SymbolKind::Time => &[AttrKind::Start, AttrKind::End, AttrKind::Guess],
        SymbolKind::State => {
            &[AttrKind::Start, AttrKind::End, AttrKind::In, AttrKind::Guess, AttrKind::Scale]
        }
        SymbolKind::Control | SymbolKind::Param => {
            &[AttrKind::In, AttrKind::Guess, AttrKind::Scale]
        }
        _ => &[],
    }
}

/// A number in the user's unit, for messages.
pub(crate) fn show(v: f64, scale: f64) -> String {
    let x = v / scale;
    let r = (x * 1e9).round() / 1e9;
    format!("{r}")
}

impl<'a> Checker<'a> {
    pub(super) fn unit_of(&mut self, u: &Option<UnitExpr>) -> Option<Unit> {
        let u = u.as_ref()?;
        match units::parse_unit(u) {
            Ok(unit) => Some(unit),
            Err(unknown) => {
                for x in unknown {
                    self.push(unknown_unit(&x));
                }
                None
            }
        }
    }

    /// Declares a global name, or reports the clash and returns `None`.
    fn declare(&mut self, mut s: Symbol) -> Option<SymbolId> {
        if let Some(&prev) = self.globals.get(&s.name) {
            let p = self.sym(prev);
            let d = if p.kind == SymbolKind::Builtin {
                Diagnostic::new(
                    codes::DUPLICATE_DEFINITION,
                    format!("`{}` is a built-in name", s.name),
                    s.name_span,
                    "cannot be declared again",
                )
                .with_help("choose another name")
            } else {
                Diagnostic::new(
                    codes::DUPLICATE_DEFINITION,
                    format!("`{}` is declared twice", s.name),
                    s.name_span,
                    "second declaration",
                )
                .with_label(p.name_span, format!("first declared here as a {}", p.kind.describe()))
                .with_help("rename one of them")
            };
            self.push(d);
            return None;
        }
        s.index = self.a.symbols.iter().filter(|x| x.kind == s.kind).count();
        let name = s.name.clone();
        let id = self.add_symbol(s);
        self.globals.insert(name, id);
        Some(id)
    }

    fn new_symbol(
        &self,
        name: &Ident,
        kind: SymbolKind,
        decl: Span,
        doc: Option<String>,
    ) -> Symbol {
        Symbol {
            id: SymbolId(0),
            name: name.name.clone(),
            kind,
            name_span: name.span,
            decl_span: decl,
            doc,
            unit: None,
            dimension: None,
            value: None,
            index: 0,
            attrs: VarAttrs::default(),
            builtin: None,
            params: Vec::new(),
            body: None,
            owner: None,
        }
    }

    pub(super) fn collect_declarations(&mut self) {
        let file = self.file;
        let mut first_time: Option<Span> = None;
        for item in &file.items {
            match item {
                Item::Const(b) => {
                    for c in &b.entries {
                        let unit = self.unit_of(&c.unit);
                        let mut s =
                            self.new_symbol(&c.name, SymbolKind::Const, c.span, doc(&c.doc));
                        s.dimension = unit.as_ref().map(|u| u.dimension);
                        s.unit = unit;
                        if let Some(id) = self.declare(s) {
                            self.const_decls.insert(id, c);
                            self.const_state.insert(id, ConstState::Pending);
                        }
                    }
                }
                Item::Fn(f) => {
                    let mut s = self.new_symbol(&f.name, SymbolKind::Function, f.span, doc(&f.doc));
                    s.body = Some(f.body.clone());
                    if let Some(id) = self.declare(s) {
                        self.fn_decls.insert(id, f);
                        let mut scope: HashMap<String, SymbolId> = HashMap::new();
                        let mut params = Vec::new();
                        for p in &f.params {
                            if let Some(&prev) = scope.get(&p.name) {
                                let d = Diagnostic::new(
                                    codes::DUPLICATE_DEFINITION,
                                    format!("parameter `{}` is declared twice", p.name),
                                    p.span,
                                    "second declaration",
                                )
                                .with_label(self.sym(prev).name_span, "first declared here")
                                .with_help("rename one of them");
                                self.push(d);
                                continue;
                            }
                            let mut ps = self.new_symbol(p, SymbolKind::FnParam, p.span, None);
                            ps.owner = Some(id);
                            ps.index = params.len();
                            let pid = self.add_symbol(ps);
                            scope.insert(p.name.clone(), pid);
                            params.push(pid);
                        }
                        self.a.symbols[id.index()].params = params;
                        self.fn_scopes.insert(id, scope);
                    }
                }
                Item::Time(t) => {
                    if let Some(first) = first_time {
                        let d = Diagnostic::new(
                            codes::DUPLICATE_TIME,
                            "the independent variable is declared twice",
                            t.name.span,
                            "second `time` declaration",
                        )
                        .with_label(first, "first declared here")
                        .with_help(
                            "a problem has one independent variable; remove one declaration",
                        );
                        self.push(d);
                        continue;
                    }
                    first_time = Some(t.name.span);
                    if let Some(id) = self.declare_var(t, SymbolKind::Time) {
                        self.a.time = Some(id);
                    }
                }
                Item::Param(b) => {
                    for v in &b.entries {
                        if let Some(id) = self.declare_var(v, SymbolKind::Param) {
                            self.a.params.push(id);
                        }
                    }
                }
                Item::State(b) => {
                    for v in &b.entries {
                        if let Some(id) = self.declare_var(v, SymbolKind::State) {
                            self.a.states.push(id);
                        }
                    }
                }
                Item::Control(b) => {
                    for v in &b.entries {
                        if let Some(id) = self.declare_var(v, SymbolKind::Control) {
                            self.a.controls.push(id);
                        }
                    }
                }
                _ => {}
            }
        }
    }

    fn declare_var(&mut self, v: &VarDecl, kind: SymbolKind) -> Option<SymbolId> {
        let unit = self.unit_of(&v.unit);
        let mut s = self.new_symbol(&v.name, kind, v.span, doc(&v.doc));
        s.dimension = unit.as_ref().map(|u| u.dimension);
        s.unit = unit;
        self.declare(s)
    }

    /// Marks every function on a call cycle and reports each cycle once.
    pub(super) fn find_recursion(&mut self) {
        let mut edges: HashMap<SymbolId, Vec<(SymbolId, Span)>> = HashMap::new();
        let fns: Vec<(SymbolId, &'a costate_syntax::ast::FnDecl)> = {
            let mut v: Vec<_> = self.fn_decls.iter().map(|(k, v)| (*k, *v)).collect();
            v.sort_by_key(|(k, _)| *k);
            v
        };
        for &(id, f) in &fns {
            let scope = &self.fn_scopes[&id];
            let mut out = Vec::new();
            f.body.walk(&mut |e: &Expr| {
                if let ExprKind::Call { callee, .. } = &e.kind {
                    if scope.contains_key(&callee.name) {
                        return;
                    }
                    if let Some(&g) = self.globals.get(&callee.name) {
                        if self.fn_decls.contains_key(&g) {
                            out.push((g, callee.span));
                        }
                    }
                }
            });
            self.calls.insert(id, out.iter().map(|(g, _)| *g).collect());
            edges.insert(id, out);
        }
        // Depth-first search; a back edge closes a cycle made of the stack from its target.
        let mut state: HashMap<SymbolId, u8> = HashMap::new();
        for &(root, _) in &fns {
            if state.contains_key(&root) {
                continue;
            }
            let mut stack: Vec<(SymbolId, usize)> = vec![(root, 0)];
            state.insert(root, 1);
            while let Some(&mut (f, ref mut i)) = stack.last_mut() {
                let out = &edges[&f];
                if *i >= out.len() {
                    state.insert(f, 2);
                    stack.pop();
                    continue;
                }
                let (g, call_span) = out[*i];
                *i += 1;
                match state.get(&g) {
                    None => {
                        state.insert(g, 1);
                        stack.push((g, 0));
                    }
                    Some(1) => {
                        let pos = stack.iter().position(|(h, _)| *h == g).unwrap_or(0);
                        let cycle: Vec<SymbolId> = stack[pos..].iter().map(|(h, _)| *h).collect();
                        let fresh = cycle.iter().any(|h| !self.recursive.contains(h));
                        self.recursive.extend(cycle.iter().copied());
                        if fresh {
                            self.report_cycle(&cycle, call_span);
                        }
                    }
                    _ => {}
                }
            }
        }
    }

    fn report_cycle(&mut self, cycle: &[SymbolId], call_span: Span) {
        let first = self.sym(cycle[0]);
        let msg = if cycle.len() == 1 {
            format!("function `{}` calls itself", first.name)
        } else {
            let names: Vec<String> =
                cycle.iter().map(|f| format!("`{}`", self.sym(*f).name)).collect();
            format!("functions {} call each other in a cycle", names.join(", "))
        };
        let d = Diagnostic::new(
            codes::RECURSIVE_FUNCTION,
            msg,
            call_span,
            "this call closes the cycle",
        )
        .with_label(first.name_span, "defined here")
        .with_help("functions are inlined and must not recurse; write the expression out");
        self.push(d);
    }

    pub(super) fn check_fn_bodies(&mut self) {
        let mut fns: Vec<_> = self.fn_decls.iter().map(|(k, v)| (*k, *v)).collect();
        fns.sort_by_key(|(k, _)| *k);
        for (id, f) in fns {
            let cx = Cx::new(Place::Fn(id));
            let info = self.expr(&f.body, &cx);
            if let Some(d) = info.ty.dimension() {
                self.a.symbols[id.index()].dimension = Some(d);
            }
        }
    }

    /// Folds every constant, each after the constants its value names (depth-first, with an
    /// explicit stack), so that a long chain `a = b + 1, b = c + 1, ...` never nests one
    /// folding inside another.
    pub(super) fn check_consts(&mut self) {
        let mut ids: Vec<SymbolId> = self.const_decls.keys().copied().collect();
        ids.sort();
        let deps: HashMap<SymbolId, Vec<SymbolId>> =
            ids.iter().map(|&id| (id, self.const_dependencies(id))).collect();
        let mut visited: HashSet<SymbolId> = HashSet::new();
        // Constants on a cycle are left to the final pass in declaration order, which reports
        // the cycle at the first of them.
        let mut cyclic: HashSet<SymbolId> = HashSet::new();
        let mut order = Vec::with_capacity(ids.len());
        for &root in &ids {
            if !visited.insert(root) {
                continue;
            }
            let mut stack: Vec<(SymbolId, usize)> = vec![(root, 0)];
            let mut on_stack: HashSet<SymbolId> = HashSet::from([root]);
            while let Some((id, next)) = stack.last_mut() {
                let id = *id;
                match deps[&id].get(*next) {
                    Some(&dep) => {
                        *next += 1;
                        if visited.insert(dep) {
                            stack.push((dep, 0));
                            on_stack.insert(dep);
                        } else if on_stack.contains(&dep) {
                            let at = stack.iter().position(|&(s, _)| s == dep).unwrap_or(0);
                            cyclic.extend(stack[at..].iter().map(|&(s, _)| s));
                        }
                    }
                    None => {
                        if !cyclic.contains(&id) {
                            order.push(id);
                        }
                        on_stack.remove(&id);
                        stack.pop();
                    }
                }
            }
        }
        for id in order.into_iter().chain(ids) {
            self.const_info(id, None);
        }
    }

    /// The constants named directly in a constant's value.
    fn const_dependencies(&self, id: SymbolId) -> Vec<SymbolId> {
        let mut out = Vec::new();
        if let Some(decl) = self.const_decls.get(&id) {
            decl.value.walk(&mut |e: &Expr| {
                if let ExprKind::Name(n) = &e.kind {
                    if let Some(&g) = self.globals.get(&n.name) {
                        if self.const_decls.contains_key(&g) && !out.contains(&g) {
                            out.push(g);
                        }
                    }
                }
            });
        }
        out
    }

    /// The type and SI value of a constant, checking its declaration on first use. `use_span`
    /// is where it is used (for reporting a cycle).
    pub(super) fn const_info(&mut self, id: SymbolId, use_span: Option<Span>) -> (Ty, Option<f64>) {
        match self.const_state.get(&id).copied() {
            Some(ConstState::Done) => {
                return (
                    self.const_types.get(&id).copied().unwrap_or(Ty::Unknown),
                    self.sym(id).value,
                )
            }
            Some(ConstState::InProgress) => {
                if self.cycle_reported.insert(id) {
                    let s = self.sym(id);
                    let d = Diagnostic::new(
                        codes::CYCLIC_CONSTANT,
                        format!("constant `{}` is defined in terms of itself", s.name),
                        use_span.unwrap_or(s.name_span),
                        "used here while its own value is computed",
                    )
                    .with_label(s.name_span, "defined here")
                    .with_help("give one of the constants in the cycle a plain value");
                    self.deferred.push(d);
                }
                return (Ty::Unknown, None);
            }
            Some(ConstState::Pending) => {}
            None => return (Ty::Unknown, None),
        }
        let Some(decl) = self.const_decls.get(&id).copied() else { return (Ty::Unknown, None) };
        if self.nesting >= super::expr::MAX_DEFINITION_NESTING {
            let at = use_span.unwrap_or(self.sym(id).name_span);
            self.too_deep(
                at,
                format!(
                    "more than {} definitions open when `{}` is needed",
                    super::expr::MAX_DEFINITION_NESTING,
                    self.sym(id).name
                ),
            );
            return (Ty::Unknown, None);
        }
        self.const_state.insert(id, ConstState::InProgress);
        self.nesting += 1;
        // A constant may be first needed while a function body is expanded for one call; its
        // own findings must be recorded normally all the same.
        let saved_recording = std::mem::replace(&mut self.recording, true);
        let saved = std::mem::take(&mut self.a.diagnostics);
        let mut info = self.expr(&decl.value, &Cx::new(Place::Const));
        let unit = self.sym(id).unit.clone();
        let ty = match &unit {
            Some(u) => {
                let target = Ty::known(u);
                self.settle(&decl.value, &mut info, target);
                if let Ty::Known { dim, .. } = info.ty {
                    if dim != u.dimension {
                        let d = Diagnostic::new(
                            codes::UNIT_MISMATCH,
                            format!(
                                "constant `{}` is declared in `{}` but its value is in `{}`",
                                decl.name.name, u.dimension, dim
                            ),
                            decl.value.span,
                            format!("this is `{dim}`"),
                        )
                        .with_label(
                            decl.unit.as_ref().map_or(decl.name.span, |u| u.span),
                            "declared unit",
                        )
                        .with_help("change the declared unit or the unit of the value");
                        self.push(d);
                    }
                }
                target
            }
            None => info.ty,
        };
        let produced = std::mem::replace(&mut self.a.diagnostics, saved);
        self.deferred.extend(produced);
        self.recording = saved_recording;
        let s = &mut self.a.symbols[id.index()];
        s.value = info.value;
        if s.dimension.is_none() {
            s.dimension = ty.dimension();
        }
        self.const_types.insert(id, ty);
        self.const_state.insert(id, ConstState::Done);
        self.nesting -= 1;
        (ty, info.value)
    }

    pub(super) fn check_var_attrs(&mut self) {
        let file = self.file;
        let mut seen_time = false;
        for item in &file.items {
            let (decls, kind): (Vec<&VarDecl>, SymbolKind) = match item {
                Item::Time(t) => {
                    if seen_time {
                        continue;
                    }
                    seen_time = true;
                    (vec![t], SymbolKind::Time)
                }
                Item::Param(b) => (b.entries.iter().collect(), SymbolKind::Param),
                Item::State(b) => (b.entries.iter().collect(), SymbolKind::State),
                Item::Control(b) => (b.entries.iter().collect(), SymbolKind::Control),
                _ => continue,
            };
            for v in decls {
                // Only the declaration that owns the name (not a rejected duplicate).
                let Some(&id) = self.globals.get(&v.name.name) else { continue };
                if self.sym(id).name_span != v.name.span {
                    continue;
                }
                self.var_attrs(id, v, kind);
            }
        }
    }

    fn var_attrs(&mut self, id: SymbolId, v: &'a VarDecl, kind: SymbolKind) {
        let ty = self.var_ty(id);
        let scale = ty.scale();
        let name = v.name.name.clone();
        let mut attrs = VarAttrs::default();
        let mut first: HashMap<AttrKind, Span> = HashMap::new();
        let mut spans: HashMap<AttrKind, &'a Attr> = HashMap::new();
        for attr in &v.attrs {
            if let Some(&prev) = first.get(&attr.kind) {
                let d = Diagnostic::new(
                    codes::DUPLICATE_ATTRIBUTE,
                    format!("`{}` is given twice for `{name}`", attr.kind.keyword()),
                    attr.kind_span,
                    "second one",
                )
                .with_label(prev, "first given here")
                .with_help("keep one of them");
                self.push(d);
                continue;
            }
            first.insert(attr.kind, attr.kind_span);
            if !allowed(kind).contains(&attr.kind) {
                let list: Vec<String> =
                    allowed(kind).iter().map(|k| format!("`{}`", k.keyword())).collect();
                let d = Diagnostic::new(
                    codes::ATTRIBUTE_NOT_ALLOWED,
                    format!(
                        "`{}` is not allowed on {} `{name}`",
                        attr.kind.keyword(),
                        kind.describe()
                    ),
                    attr.kind_span,
                    format!("a {} has no `{}`", kind.describe(), attr.kind.keyword()),
                )
                .with_help(format!(
                    "a {} takes {}",
                    kind.describe(),
                    join_or(&list)
                ));
                self.push(d);
                continue;
            }
            spans.insert(attr.kind, attr);
            match (attr.kind, &attr.value) {
                (AttrKind::In, AttrValue::Range(r)) => attrs.bounds = self.range(r, ty),
                (AttrKind::Start | AttrKind::End, AttrValue::Expr(e)) => {
                    let ep = self.attr_value(e, ty).map(Endpoint::Fixed);
                    if attr.kind == AttrKind::Start {
                        attrs.start = ep;
                    } else {
                        attrs.end = ep;
                    }
                }
                (AttrKind::Start, AttrValue::Free(_) | AttrValue::Range(_))
                    if kind == SymbolKind::Time =>
                {
                    let d = Diagnostic::new(
                        codes::INVALID_ATTRIBUTE_VALUE,
                        "the start of the horizon must be a fixed value",
                        attr.span,
                        "not a single value",
                    )
                    .with_help(
                        "write `start 0` (shift the horizon so that it starts at a known value)",
                    );
                    self.push(d);
                }
                (AttrKind::Start | AttrKind::End, AttrValue::Free(_)) => {
                    if attr.kind == AttrKind::Start {
                        attrs.start = Some(Endpoint::Free);
                    } else {
                        attrs.end = Some(Endpoint::Free);
                    }
                }
                (AttrKind::Start | AttrKind::End, AttrValue::Range(r)) => {
                    let ep = self.range(r, ty).map(Endpoint::Range);
                    if attr.kind == AttrKind::Start {
                        attrs.start = ep;
                    } else {
                        attrs.end = ep;
                    }
                }
                (AttrKind::Guess | AttrKind::Scale, AttrValue::Expr(e)) if matches!(&e.kind, ExprKind::Name(n) if n.name == "free" && !self.globals.contains_key("free")) =>
                {
                    let d = Diagnostic::new(
                        codes::INVALID_ATTRIBUTE_VALUE,
                        format!("`{}` takes a single value", attr.kind.keyword()),
                        attr.span,
                        "`free` is only meaningful for `start` and `end`",
                    )
                    .with_help(format!("write `{} <value>` or leave it out", attr.kind.keyword()));
                    self.push(d);
                }
                (AttrKind::Guess | AttrKind::Scale, AttrValue::Expr(e)) => {
                    let val = self.attr_value(e, ty);
                    if attr.kind == AttrKind::Guess {
                        attrs.guess = val;
                    } else {
                        if let Some(s) = val.filter(|s| *s <= 0.0) {
                            let d = Diagnostic::new(
                                codes::INVALID_SCALE,
                                format!(
                                    "the scale of `{name}` must be positive, found {}",
                                    show(s, scale)
                                ),
                                e.span,
                                "not positive",
                            )
                            .with_help(
                                "give the typical magnitude of the quantity, e.g. `scale 10`",
                            );
                            self.push(d);
                        }
                        attrs.scale = val.filter(|s| *s > 0.0);
                    }
                }
                (k, _) => {
                    let d = Diagnostic::new(
                        codes::INVALID_ATTRIBUTE_VALUE,
                        format!("`{}` takes a single value", k.keyword()),
                        attr.span,
                        "not a single value",
                    )
                    .with_help(format!("write `{} <value>`", k.keyword()));
                    self.push(d);
                }
            }
        }
        if kind == SymbolKind::Time {
            self.time_checks(&name, v, &mut attrs, &spans, scale);
        }
        self.bounds_checks(&name, &attrs, &spans, scale);
        self.a.symbols[id.index()].attrs = attrs;
    }

    fn time_checks(
        &mut self,
        name: &str,
        v: &VarDecl,
        attrs: &mut VarAttrs,
        spans: &HashMap<AttrKind, &'a Attr>,
        scale: f64,
    ) {
        if attrs.start.is_none() && !spans.contains_key(&AttrKind::Start) {
            attrs.start = Some(Endpoint::Fixed(0.0));
        }
        let t0 = match attrs.start {
            Some(Endpoint::Fixed(t0)) => t0,
            _ => return,
        };
        let Some(end_attr) = spans.get(&AttrKind::End) else {
            let d = Diagnostic::new(
                codes::MISSING_END_TIME,
                format!("the horizon of `{name}` has no end"),
                v.name.span,
                "no `end` given",
            )
            .with_help("add `end <value>`, `end in LO .. HI` or `end free`");
            self.push(d);
            return;
        };
        let empty = |hi: f64| hi <= t0;
        match attrs.end {
            Some(Endpoint::Fixed(tf)) if empty(tf) => {
                let d = Diagnostic::new(
                    codes::EMPTY_HORIZON,
                    format!(
                        "the horizon ends at {} but starts at {}",
                        show(tf, scale),
                        show(t0, scale)
                    ),
                    end_attr.span,
                    "not after the start",
                )
                .with_help("the end must come after the start");
                self.push(d);
            }
            Some(Endpoint::Range(r)) if empty(r.hi) => {
                let d = Diagnostic::new(
                    codes::EMPTY_HORIZON,
                    format!(
                        "the horizon can end at {} at most but starts at {}",
                        show(r.hi, scale),
                        show(t0, scale)
                    ),
                    end_attr.span,
                    "no end after the start",
                )
                .with_help("raise the upper end of the range above the start");
                self.push(d);
            }
            Some(Endpoint::Free) | Some(Endpoint::Range(Interval { hi: f64::INFINITY, .. })) => {
                let d = Diagnostic::new(
                    codes::UNBOUNDED_END_TIME,
                    format!("the end of `{name}` is free without an upper bound"),
                    end_attr.span,
                    "no upper bound",
                )
                .with_note("an unbounded horizon lets the solver wander to huge end values")
                .with_help("bound it, e.g. `end in 0 .. 100 guess 10`");
                self.push(d);
            }
            _ => {}
        }
        if let (Some(g), Some(Endpoint::Range(r)), Some(ga)) =
            (attrs.guess, attrs.end, spans.get(&AttrKind::Guess))
        {
            if !r.contains(g) {
                let d = guess_outside(name, g, ga, end_attr.span, scale);
                self.push(d);
            }
        }
    }

    fn bounds_checks(
        &mut self,
        name: &str,
        attrs: &VarAttrs,
        spans: &HashMap<AttrKind, &'a Attr>,
        scale: f64,
    ) {
        let (Some(b), Some(in_attr)) = (attrs.bounds, spans.get(&AttrKind::In)) else { return };
        if b.lo > b.hi {
            return; // already reported as empty
        }
        for (kind, ep) in [(AttrKind::Start, attrs.start), (AttrKind::End, attrs.end)] {
            let Some(attr) = spans.get(&kind) else { continue };
            let value_span = match &attr.value {
                AttrValue::Expr(e) => e.span,
                AttrValue::Range(r) => r.span,
                AttrValue::Free(s) => *s,
            };
            let outside = match ep {
                Some(Endpoint::Fixed(x)) => {
                    (!b.contains(x)).then(|| format!("{} value {}", kind.keyword(), show(x, scale)))
                }
                Some(Endpoint::Range(r)) if r.lo <= r.hi && (r.hi < b.lo || r.lo > b.hi) => {
                    Some(format!("{} range", kind.keyword()))
                }
                _ => None,
            };
            if let Some(what) = outside {
                let d = Diagnostic::new(
                    codes::VALUE_OUTSIDE_BOUNDS,
                    format!(
                        "the {what} of `{name}` is outside its bounds {}",
                        show_interval(b, scale)
                    ),
                    value_span,
                    "outside the bounds",
                )
                .with_label(in_attr.span, "bounds declared here")
                .with_help("change the value or widen the bounds");
                self.push(d);
            }
        }
        if let (Some(g), Some(ga)) = (attrs.guess, spans.get(&AttrKind::Guess)) {
            if !b.contains(g) {
                let d = guess_outside(name, g, ga, in_attr.span, scale);
                self.push(d);
            }
        }
    }

    /// Folds `LO .. HI` in the declared unit and reports an empty range.
    fn range(&mut self, r: &'a Range, ty: Ty) -> Option<Interval> {
        let lo = match &r.lo {
            Some(e) => self.attr_value(e, ty),
            None => Some(f64::NEG_INFINITY),
        };
        let hi = match &r.hi {
            Some(e) => self.attr_value(e, ty),
            None => Some(f64::INFINITY),
        };
        let (lo, hi) = (lo?, hi?);
        if lo > hi {
            let d = Diagnostic::new(
                codes::EMPTY_BOUNDS,
                format!("the range {} .. {} is empty", show(lo, ty.scale()), show(hi, ty.scale())),
                r.span,
                "the lower end is above the upper end",
            )
            .with_help(format!(
                "write `{} .. {}`",
                show(hi, ty.scale()),
                show(lo, ty.scale())
            ));
            self.push(d);
        }
        Some(Interval { lo, hi })
    }

    /// Folds an attribute value, taken in the declared unit when bare; `None` if not constant.
    fn attr_value(&mut self, e: &'a Expr, ty: Ty) -> Option<f64> {
        let mut info = self.expr(e, &Cx::new(Place::Attr));
        self.settle(e, &mut info, ty);
        if let (Ty::Known { dim, .. }, Ty::Known { dim: want, .. }) = (info.ty, ty) {
            if dim != want {
                let d = Diagnostic::new(
                    codes::UNIT_MISMATCH,
                    format!("this value is in `{dim}` but the declaration is in `{want}`"),
                    e.span,
                    format!("this is `{dim}`"),
                )
                .with_help(
                    "write the value in a unit of the declared dimension, or leave the unit off",
                );
                self.push(d);
                return None;
            }
        }
        info.value
    }
}

fn guess_outside(name: &str, g: f64, ga: &Attr, range: Span, scale: f64) -> Diagnostic {
    let span = match &ga.value {
        AttrValue::Expr(e) => e.span,
        _ => ga.span,
    };
    Diagnostic::new(
        codes::GUESS_OUTSIDE_BOUNDS,
        format!("the guess {} for `{name}` is outside its bounds", show(g, scale)),
        span,
        "outside the bounds",
    )
    .with_label(range, "bounds declared here")
    .with_help("choose a guess inside the bounds")
}

fn show_interval(b: Interval, scale: f64) -> String {
    let side = |x: f64| if x.is_finite() { show(x, scale) } else { String::new() };
    format!("{} .. {}", side(b.lo), side(b.hi)).trim().to_string()
}

fn join_or(items: &[String]) -> String {
    match items.len() {
        0 => "no attributes".to_string(),
        1 => items[0].clone(),
        n => format!("{} and {}", items[..n - 1].join(", "), items[n - 1]),
    }
}

fn doc(d: &Option<costate_syntax::ast::Doc>) -> Option<String> {
    d.as_ref().map(|d| d.text.clone())
}

pub(crate) fn unknown_unit(x: &units::UnknownUnit) -> Diagnostic {
    let mut d = Diagnostic::new(
        codes::UNKNOWN_UNIT,
        format!("unknown unit `{}`", x.symbol),
        x.span,
        "not in the unit table",
    );
    if matches!(x.symbol.as_str(), "degC" | "degF" | "celsius" | "fahrenheit") {
        d = d
            .with_note("temperatures on offset scales convert by an offset, not a factor")
            .with_help("use `K`");
    } else if let Some(s) = x.suggestion {
        d = d.with_help(format!("did you mean `{s}`?"));
    } else {
        d = d.with_help("see the unit table in docs/language.md");
    }
    d
}

/// Suggestion among `names` for "did you mean".
pub(crate) fn did_you_mean<'n>(
    name: &str,
    names: impl IntoIterator<Item = &'n str>,
) -> Option<String> {
    closest_name(name, names).map(|s| format!("did you mean `{s}`?"))
}
