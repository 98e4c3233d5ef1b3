//! The way back from the numeric model to the source: which declaration each variable index is,
//! in which unit the user wrote it, and which source entry each output row of each function
//! comes from.
//!
//! Owns plain data and lookups only. It must not hold the model or evaluate anything: a solver
//! finding (a NaN in `Dynamics` row 3, a violated `Boundary` row 1) arrives as a
//! [`FunctionKind`] and a row index and leaves as a span and a description.

use costate_model::FunctionKind;
use costate_syntax::ast::Sense;
use costate_syntax::Span;

/// A declared quantity: the independent variable, a state, a control or a parameter.
#[derive(Clone, Debug, PartialEq)]
pub struct VarSource {
    pub name: String,
    /// Span of the name at its declaration.
    pub name_span: Span,
    /// Span of the whole declaration (name, unit and attributes).
    pub decl_span: Span,
    /// The declared unit as the user wrote it, normalised (`km/h`); `None` when none was declared
    /// (the value is then taken as SI).
    pub unit: Option<String>,
    /// SI value of one user unit: divide an SI value by it to show it in the user's unit.
    pub scale: f64,
}

impl VarSource {
    /// An SI value in the declared unit.
    pub fn to_user(&self, si: f64) -> f64 {
        si / self.scale
    }

    /// A value in the declared unit, in SI.
    pub fn to_si(&self, user: f64) -> f64 {
        user * self.scale
    }
}

/// One output row of a compiled function.
#[derive(Clone, Debug, PartialEq)]
pub struct RowSource {
    /// The source entry the row comes from (a dynamics equation, a constraint with its label,
    /// the cost statement, the first `integral(..)` occurrence): where a finding is reported.
    pub span: Span,
    /// The expression computed by the row; for a constraint row written `a <= b` with both sides
    /// variable this covers `a` to `b`.
    pub expr_span: Span,
    /// The constraint label, if the entry has one.
    pub label: Option<String>,
    /// Short text for messages: "dynamics of `omega`", "path constraint `sway`",
    /// "boundary constraint `end(x) == 12`, row 2 of 2".
    pub description: String,
}

/// One integral `q`: its integrand is a row of [`FunctionKind::Integrands`].
#[derive(Clone, Debug, PartialEq)]
pub struct IntegralSource {
    pub row: RowSource,
    /// Every `integral(..)` occurrence that shares this `q` (identical integrands share one), in
    /// source order; `row.span` is the first.
    pub occurrences: Vec<Span>,
}

/// The `minimize`/`maximize` statement.
#[derive(Clone, Debug, PartialEq)]
pub struct CostSource {
    /// The whole statement.
    pub span: Span,
    /// The expression after the sense keyword.
    pub expr_span: Span,
    pub sense: Sense,
}

/// From every index and row of the numeric model back to the source. See the module docs.
#[derive(Clone, Debug, PartialEq)]
pub struct SourceMap {
    /// The name after `problem` (empty if the header is missing).
    pub problem_name: String,
    /// Span of that name (an empty span at the start of the file if the header is missing).
    pub problem_span: Span,
    pub time: VarSource,
    /// Indexed like `Ocp::states` (and the `x` inputs).
    pub states: Vec<VarSource>,
    /// Indexed like `Ocp::controls`.
    pub controls: Vec<VarSource>,
    /// Indexed like `Ocp::params`.
    pub params: Vec<VarSource>,
    /// One per output of `Ocp::dynamics`.
    pub dynamics: Vec<RowSource>,
    /// One per output of `Ocp::integrands` (and `q` input of the endpoint functions).
    pub integrals: Vec<IntegralSource>,
    /// One per output of `Ocp::path`.
    pub path: Vec<RowSource>,
    /// The single output of `Ocp::objective`.
    pub objective: RowSource,
    /// One per output of `Ocp::boundary`.
    pub boundary: Vec<RowSource>,
    pub cost: CostSource,
}

impl SourceMap {
    /// The row's source: where to report a finding about output `row` of the function `kind`,
    /// and how to name it. `None` if there is no such row.
    pub fn locate(&self, kind: FunctionKind, row: usize) -> Option<(Span, String)> {
        self.row(kind, row).map(|r| (r.span, r.description.clone()))
    }

    /// The full record behind [`SourceMap::locate`].
    pub fn row(&self, kind: FunctionKind, row: usize) -> Option<&RowSource> {
        match kind {
            FunctionKind::Dynamics => self.dynamics.get(row),
            FunctionKind::Integrands => self.integrals.get(row).map(|i| &i.row),
            FunctionKind::Path => self.path.get(row),
            FunctionKind::Objective => (row == 0).then_some(&self.objective),
            FunctionKind::Boundary => self.boundary.get(row),
        }
    }

    /// Number of rows recorded for `kind` (equal to the function's output count).
    pub fn row_count(&self, kind: FunctionKind) -> usize {
        match kind {
            FunctionKind::Dynamics => self.dynamics.len(),
            FunctionKind::Integrands => self.integrals.len(),
            FunctionKind::Path => self.path.len(),
            FunctionKind::Objective => 1,
            FunctionKind::Boundary => self.boundary.len(),
        }
    }
}
