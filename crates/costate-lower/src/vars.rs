//! Declarations -> bounds, guesses, scales and the horizon of the numeric model.
//!
//! Owns the reading of the checker's folded attributes (already SI) and the defaults the source
//! leaves open. It does not build expressions or source-map rows.
//!
//! # Defaults
//!
//! - A missing `start`/`end` of a state leaves that end free; a missing `in` leaves the
//!   trajectory unbounded. `end free` and `start free` are unbounded too.
//! - **Scale** (when no `scale` is written): the largest magnitude among the finite numbers the
//!   declaration states (start and end values or ranges, `in` bounds, `guess`), or 1 when there
//!   is none or all are 0. Such a number is the size the user expects the quantity to reach, so
//!   dividing by it brings the scaled variable to order one (common practice in NLP scaling).
//!   The guess counts inside the `in` bounds only, and at most a thousand times the other
//!   magnitudes stated; magnitudes below 1e-60 count as zero, and every scale lies in
//!   1e-60 ..= 1e60, so scaled data stay finite whatever the file says.
//! - **Horizon start**: the independent variable's `start`, or 0 when none is written.
//! - **Free end** (`end free` or `end in LO .. HI`): the lower bound is raised to the start (an
//!   end before the start has no meaning; the checker reports a range entirely before it).
//!   Guess: the written `guess`; else the midpoint of the bounds when both are finite; else,
//!   with only a lower bound `LO`, twice the distance from the start to `LO` past the start
//!   (`LO + (LO - start)`), or one declared time unit past the start when `LO` is the start;
//!   with only an upper bound, the midpoint between the start and it; with none, one declared
//!   time unit past the start (1 s when the time has no unit). The guess is then clamped into
//!   the bounds.

use costate_check::{Analysis, Endpoint, Interval, Symbol, SymbolKind, VarAttrs};
use costate_model::{Bounds, ControlInfo, EndTime, Horizon, ParamInfo, StateInfo};
use costate_syntax::Diagnostic;

use crate::codes;
use crate::source_map::VarSource;

fn interval(i: Option<Interval>) -> Bounds {
    i.map_or(Bounds::FREE, |i| Bounds { lo: i.lo, hi: i.hi })
}

fn endpoint(e: Option<Endpoint>) -> Bounds {
    match e {
        Some(Endpoint::Fixed(v)) => Bounds::fixed(v),
        Some(Endpoint::Range(i)) => Bounds { lo: i.lo, hi: i.hi },
        Some(Endpoint::Free) | None => Bounds::FREE,
    }
}

/// Smallest and largest scale used: products of two scales (Hessian entries) and their
/// reciprocals stay far inside the range of `f64` (a scale of 5e-324 made a gradient infinite,
/// one of 1e300 a Hessian entry). Magnitudes below the smallest count as zero.
pub(crate) const SCALE_RANGE: (f64, f64) = (1e-60, 1e60);

/// A guess counts towards the scale only up to this multiple of the magnitudes the
/// declaration states: a guess a million times the bounds is more likely a slip than the size
/// the user expects.
const GUESS_SCALE_LIMIT: f64 = 1e3;

/// See the module docs: user scale, else the largest finite magnitude stated, else 1; always
/// within [`SCALE_RANGE`].
pub(crate) fn scale_of(attrs: &VarAttrs) -> f64 {
    let (lowest, highest) = SCALE_RANGE;
    if let Some(s) = attrs.scale.filter(|s| s.is_finite() && *s > 0.0) {
        return s.clamp(lowest, highest);
    }
    let bounds = interval(attrs.bounds);
    let mut values = Vec::new();
    for b in [bounds, endpoint(attrs.start), endpoint(attrs.end)] {
        values.extend([b.lo, b.hi]);
    }
    let magnitude = |v: &f64| if v.is_finite() && v.abs() >= lowest { v.abs() } else { 0.0 };
    let stated = values.iter().map(magnitude).fold(0.0_f64, f64::max);
    // The guess as the transcription uses it: inside the `in` bounds.
    let guess = attrs.guess.map_or(0.0, |g| magnitude(&g.clamp(bounds.lo, bounds.hi)));
    let guess = if stated > 0.0 { guess.min(GUESS_SCALE_LIMIT * stated) } else { guess };
    let m = stated.max(guess);
    if m > 0.0 {
        m.min(highest)
    } else {
        1.0
    }
}

pub(crate) fn state_info(s: &Symbol) -> StateInfo {
    StateInfo {
        bounds: interval(s.attrs.bounds),
        start: endpoint(s.attrs.start),
        end: endpoint(s.attrs.end),
        guess: s.attrs.guess,
        scale: scale_of(&s.attrs),
    }
}

pub(crate) fn control_info(s: &Symbol) -> ControlInfo {
    ControlInfo {
        bounds: interval(s.attrs.bounds),
        guess: s.attrs.guess,
        scale: scale_of(&s.attrs),
    }
}

pub(crate) fn param_info(s: &Symbol) -> ParamInfo {
    ParamInfo { bounds: interval(s.attrs.bounds), guess: s.attrs.guess, scale: scale_of(&s.attrs) }
}

pub(crate) fn var_source(s: &Symbol) -> VarSource {
    VarSource {
        name: s.name.clone(),
        name_span: s.name_span,
        decl_span: s.decl_span,
        unit: s.unit.as_ref().map(|u| u.display.clone()),
        scale: s.unit.as_ref().map_or(1.0, |u| u.scale),
    }
}

/// The horizon from the independent variable's attributes; see the module docs.
pub(crate) fn horizon(time: &Symbol) -> Result<Horizon, Box<Diagnostic>> {
    let a = &time.attrs;
    let start = match a.start {
        None => 0.0,
        Some(Endpoint::Fixed(v)) => v,
        Some(Endpoint::Free | Endpoint::Range(_)) => {
            return Err(Box::new(
                Diagnostic::new(
                    codes::START_TIME_NOT_FIXED,
                    format!("the start of `{}` must be a fixed value", time.name),
                    time.decl_span,
                    "the horizon starts here",
                )
                .with_help(format!("write `start 0` (or another number) for `{}`", time.name)),
            ));
        }
    };
    let unit = time.unit.as_ref().map_or(1.0, |u| u.scale);
    let bounds = match a.end {
        Some(Endpoint::Fixed(v)) => return Ok(Horizon { start, end: EndTime::Fixed(v) }),
        Some(Endpoint::Free) => Bounds { lo: start, hi: f64::INFINITY },
        Some(Endpoint::Range(i)) => Bounds { lo: i.lo.max(start), hi: i.hi },
        None => {
            return Err(Box::new(
                Diagnostic::new(
                    codes::INCONSISTENT_ANALYSIS,
                    format!("cannot lower the horizon: `{}` has no `end`", time.name),
                    time.decl_span,
                    "no end",
                )
                .with_help("the checker should have reported this; this is a bug in costate, please report it with the file"),
            ));
        }
    };
    let guess = a.guess.unwrap_or(match (bounds.lo.is_finite(), bounds.hi.is_finite()) {
        (true, true) => 0.5 * (bounds.lo + bounds.hi),
        (true, false) if bounds.lo > start => bounds.lo + (bounds.lo - start),
        (false, true) => 0.5 * (start + bounds.hi),
        _ => start + unit,
    });
    let guess = guess.max(bounds.lo).min(bounds.hi);
    Ok(Horizon { start, end: EndTime::Free { bounds, guess } })
}

/// The symbol of the independent variable, if the analysis has one of the right kind.
pub(crate) fn time_symbol(a: &Analysis) -> Option<&Symbol> {
    a.time.map(|t| a.symbol(t)).filter(|s| s.kind == SymbolKind::Time)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scale_prefers_the_user_scale_then_the_largest_stated_magnitude() {
        let mut a = VarAttrs {
            scale: Some(7.0),
            bounds: Some(Interval { lo: -1e3, hi: 2.0 }),
            ..VarAttrs::default()
        };
        assert_eq!(scale_of(&a), 7.0);
        a.scale = None;
        assert_eq!(scale_of(&a), 1e3);
        a.bounds = Some(Interval { lo: 0.0, hi: f64::INFINITY });
        a.end = Some(Endpoint::Range(Interval { lo: -40.0, hi: 3.0 }));
        a.guess = Some(50.0);
        assert_eq!(scale_of(&a), 50.0);
        // A guess outside the `in` bounds counts as the value it is clamped to.
        a.guess = Some(-50.0);
        assert_eq!(scale_of(&a), 40.0);
        assert_eq!(scale_of(&VarAttrs::default()), 1.0);
        let zeros = VarAttrs { start: Some(Endpoint::Fixed(0.0)), ..VarAttrs::default() };
        assert_eq!(scale_of(&zeros), 1.0);
    }

    #[test]
    fn extreme_magnitudes_give_a_usable_scale() {
        // Found by fuzzing: these made the first QP's data infinite (an internal error).
        let tiny = VarAttrs { end: Some(Endpoint::Fixed(5e-324)), ..VarAttrs::default() };
        assert_eq!(scale_of(&tiny), 1.0);
        let huge_guess = VarAttrs {
            bounds: Some(Interval { lo: -1.5, hi: 1.5 }),
            guess: Some(1e300),
            ..VarAttrs::default()
        };
        assert_eq!(scale_of(&huge_guess), 1.5, "a guess counts only inside the bounds");
        let far_guess = VarAttrs {
            end: Some(Endpoint::Fixed(12.0)),
            guess: Some(1e300),
            ..VarAttrs::default()
        };
        assert_eq!(scale_of(&far_guess), 12e3, "at most a thousand times what is stated");
        let only_guess = VarAttrs { guess: Some(1e300), ..VarAttrs::default() };
        assert_eq!(scale_of(&only_guess), SCALE_RANGE.1);
        let user = VarAttrs { scale: Some(1e-300), ..VarAttrs::default() };
        assert_eq!(scale_of(&user), SCALE_RANGE.0);
    }
}
