//! Physical dimensions, units and the unit table.
//!
//! Owns: [`Dimension`] (exponents of the seven SI base dimensions, as small rationals so that
//! `sqrt` can halve them), [`Unit`] (a dimension, the factor that converts a value in this unit
//! to SI, and the text to show), the table of unit symbols with their SI prefixes, and the
//! conversion of a bracketed [`UnitExpr`] into a [`Unit`].
//!
//! Must not: decide where units are required or how bare literals adapt; that is the checker's
//! business (see the crate docs). Nothing here reports diagnostics: errors are returned as data.
//!
//! # The unit table
//!
//! | symbol | quantity | in SI | SI prefixes |
//! | --- | --- | --- | --- |
//! | `m` | length | 1 m | yes (`km`, `cm`, `mm`, `um`, `nm`, ...) |
//! | `g` | mass | 0.001 kg | yes (`kg`, `mg`, ...) |
//! | `t` | mass (tonne) | 1000 kg | no |
//! | `s` | time | 1 s | yes (`ms`, `us`, ...) |
//! | `min` | time | 60 s | no |
//! | `h` | time | 3600 s | no |
//! | `day` | time | 86400 s | no |
//! | `A` | electric current | 1 A | yes |
//! | `K` | temperature | 1 K | yes (`mK`) |
//! | `mol` | amount of substance | 1 mol | yes (`mmol`, `kmol`) |
//! | `cd` | luminous intensity | 1 cd | no |
//! | `rad` | angle (dimensionless) | 1 | yes (`mrad`) |
//! | `deg` | angle (dimensionless) | pi/180 | no |
//! | `percent` | ratio (dimensionless) | 0.01 | no |
//! | `Hz` | frequency | 1 1/s | yes |
//! | `rpm` | rotational speed | 2 pi / 60 1/s | no |
//! | `N` | force | 1 kg m/s^2 | yes (`kN`, `MN`) |
//! | `Pa` | pressure | 1 kg/(m s^2) | yes (`kPa`, `MPa`, `hPa`) |
//! | `bar` | pressure | 1e5 Pa | yes (`mbar`) |
//! | `J` | energy | 1 kg m^2/s^2 | yes (`kJ`, `MJ`) |
//! | `Wh` | energy | 3600 J | yes (`kWh`, `MWh`) |
//! | `W` | power | 1 J/s | yes (`kW`, `MW`) |
//! | `C` | electric charge | 1 A s | yes (`mC`) |
//! | `V` | voltage | 1 W/A | yes (`mV`, `kV`) |
//! | `Ohm` | resistance | 1 V/A | yes (`mOhm`, `kOhm`) |
//! | `L` | volume | 0.001 m^3 | yes (`mL`) |
//!
//! Prefixes: `G` 1e9, `M` 1e6, `k` 1e3, `h` 1e2, `c` 1e-2, `m` 1e-3, `u` 1e-6, `n` 1e-9.
//! An exact symbol wins over a prefixed reading (`min` is minutes, `h` is hours, `cd` candela,
//! `mol` mole). Tera (`T`) and tesla are left out because `T` would be ambiguous. Temperatures on
//! offset scales (degrees Celsius or Fahrenheit) are not units in this sense: their conversion is
//! affine, not a factor, so they are not supported; use `K`.
//! Angles are dimensionless (`rad` and `deg` differ only in their SI factor), so `sin(theta)` is
//! accepted for `theta [deg]` and evaluated on the value converted to radians.

use std::fmt;

use costate_syntax::ast::UnitExpr;
use costate_syntax::Span;

/// A rational number in lowest terms with a positive denominator; the exponent of one base
/// dimension. Operations return `None` on overflow rather than panicking.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Default)]
pub struct Ratio {
    num: i32,
    den: i32,
}

impl Ratio {
    pub const ZERO: Ratio = Ratio { num: 0, den: 1 };
    pub const ONE: Ratio = Ratio { num: 1, den: 1 };

    /// `num/den` in lowest terms; `None` when `den` is zero or the values overflow.
    pub fn new(num: i64, den: i64) -> Option<Ratio> {
        if den == 0 {
            return None;
        }
        let g = gcd(num.unsigned_abs(), den.unsigned_abs()).max(1) as i64;
        let (mut n, mut d) = (num / g, den / g);
        if d < 0 {
            n = n.checked_neg()?;
            d = d.checked_neg()?;
        }
        Some(Ratio { num: i32::try_from(n).ok()?, den: i32::try_from(d).ok()? })
    }

    pub fn integer(n: i32) -> Ratio {
        Ratio { num: n, den: 1 }
    }

    pub fn num(self) -> i32 {
        self.num
    }

    pub fn den(self) -> i32 {
        self.den
    }

    pub fn is_zero(self) -> bool {
        self.num == 0
    }

    pub fn to_f64(self) -> f64 {
        f64::from(self.num) / f64::from(self.den)
    }

    pub fn checked_add(self, o: Ratio) -> Option<Ratio> {
        let (a, b, c, d) =
            (i64::from(self.num), i64::from(self.den), i64::from(o.num), i64::from(o.den));
        Ratio::new(a.checked_mul(d)?.checked_add(c.checked_mul(b)?)?, b.checked_mul(d)?)
    }

    pub fn checked_mul(self, o: Ratio) -> Option<Ratio> {
        let (a, b, c, d) =
            (i64::from(self.num), i64::from(self.den), i64::from(o.num), i64::from(o.den));
        Ratio::new(a.checked_mul(c)?, b.checked_mul(d)?)
    }

    /// The simple fraction (denominator at most 12) equal to `x` within 1e-9, if any: how a
    /// folded exponent such as `0.5` or `1/3` becomes a dimension exponent.
    pub fn from_f64(x: f64) -> Option<Ratio> {
        if !x.is_finite() || x.abs() > 1e6 {
            return None;
        }
        (1..=12i64).find_map(|den| {
            let n = (x * den as f64).round();
            ((x * den as f64 - n).abs() < 1e-9).then(|| Ratio::new(n as i64, den)).flatten()
        })
    }
}

impl std::ops::Neg for Ratio {
    type Output = Ratio;

    fn neg(self) -> Ratio {
        // `num` comes from a reduced i32 pair; negating i32::MIN is the one overflow: saturate.
        Ratio { num: self.num.checked_neg().unwrap_or(i32::MAX), den: self.den }
    }
}

impl fmt::Display for Ratio {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.den == 1 {
            write!(f, "{}", self.num)
        } else {
            write!(f, "({}/{})", self.num, self.den)
        }
    }
}

fn gcd(mut a: u64, mut b: u64) -> u64 {
    while b != 0 {
        (a, b) = (b, a % b);
    }
    a
}

/// The SI base dimensions, in the order of [`Dimension`]'s exponents.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Base {
    Mass,
    Length,
    Time,
    Current,
    Temperature,
    Amount,
    Luminosity,
}

impl Base {
    pub const ALL: [Base; 7] = [
        Base::Mass,
        Base::Length,
        Base::Time,
        Base::Current,
        Base::Temperature,
        Base::Amount,
        Base::Luminosity,
    ];

    /// The SI unit symbol used when printing dimensions.
    pub fn symbol(self) -> &'static str {
        match self {
            Base::Mass => "kg",
            Base::Length => "m",
            Base::Time => "s",
            Base::Current => "A",
            Base::Temperature => "K",
            Base::Amount => "mol",
            Base::Luminosity => "cd",
        }
    }
}

/// A physical dimension: a rational exponent for each SI base dimension.
///
/// Printed as SI base units, numerator first: `kg*m/s^2`, `1/s`, `m^(1/2)`, `1` for
/// dimensionless.
#[derive(Clone, Copy, PartialEq, Eq, Hash, Default)]
pub struct Dimension {
    exps: [Ratio; 7],
}

impl Dimension {
    pub const NONE: Dimension = Dimension { exps: [Ratio::ZERO; 7] };

    pub fn base(b: Base) -> Dimension {
        let mut d = Dimension::NONE;
        d.exps[b as usize] = Ratio::ONE;
        d
    }

    /// From integer exponents in [`Base::ALL`] order (kg, m, s, A, K, mol, cd).
    pub const fn from_ints(e: [i32; 7]) -> Dimension {
        let mut exps = [Ratio::ZERO; 7];
        let mut i = 0;
        while i < 7 {
            exps[i] = Ratio { num: e[i], den: 1 };
            i += 1;
        }
        Dimension { exps }
    }

    pub fn exponent(&self, b: Base) -> Ratio {
        self.exps[b as usize]
    }

    pub fn is_dimensionless(&self) -> bool {
        self.exps.iter().all(|e| e.is_zero())
    }

    pub fn checked_mul(&self, o: &Dimension) -> Option<Dimension> {
        let mut exps = self.exps;
        for (e, x) in exps.iter_mut().zip(o.exps) {
            *e = e.checked_add(x)?;
        }
        Some(Dimension { exps })
    }

    pub fn checked_div(&self, o: &Dimension) -> Option<Dimension> {
        self.checked_mul(&o.inverse())
    }

    pub fn inverse(&self) -> Dimension {
        Dimension { exps: self.exps.map(|e| -e) }
    }

    pub fn checked_pow(&self, r: Ratio) -> Option<Dimension> {
        let mut exps = self.exps;
        for e in exps.iter_mut() {
            *e = e.checked_mul(r)?;
        }
        Some(Dimension { exps })
    }
}

impl fmt::Display for Dimension {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let part = |positive: bool| -> Vec<String> {
            Base::ALL
                .iter()
                .filter_map(|&b| {
                    let e = self.exponent(b);
                    let e = if positive { e } else { -e };
                    (e.num > 0).then(|| {
                        if e == Ratio::ONE {
                            b.symbol().to_string()
                        } else {
                            format!("{}^{}", b.symbol(), e)
                        }
                    })
                })
                .collect()
        };
        let (num, den) = (part(true), part(false));
        let num = if num.is_empty() { "1".to_string() } else { num.join("*") };
        match den.len() {
            0 => write!(f, "{num}"),
            1 => write!(f, "{num}/{}", den[0]),
            _ => write!(f, "{num}/({})", den.join("*")),
        }
    }
}

impl fmt::Debug for Dimension {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "`{self}`")
    }
}

/// A unit: its dimension, the factor converting a value in this unit to SI, and how to show it.
#[derive(Clone, Debug, PartialEq)]
pub struct Unit {
    pub dimension: Dimension,
    /// Multiply a value in this unit by `scale` to get SI: 1000 for `km`, 1/3.6 for `km/h`.
    pub scale: f64,
    /// The unit as the user wrote it, normalised: `km/h`, `kg*m^2`, `1/s`, `1`.
    pub display: String,
}

impl Unit {
    pub fn dimensionless() -> Unit {
        Unit { dimension: Dimension::NONE, scale: 1.0, display: "1".to_string() }
    }
}

/// One entry of the unit table.
#[derive(Clone, Copy, Debug)]
pub struct UnitDef {
    pub symbol: &'static str,
    /// What the unit measures, for documentation and hover.
    pub quantity: &'static str,
    pub dimension: Dimension,
    pub scale: f64,
    /// Whether SI prefixes may be put in front of it.
    pub prefixable: bool,
}

const fn def(
    symbol: &'static str,
    quantity: &'static str,
    e: [i32; 7],
    scale: f64,
    prefixable: bool,
) -> UnitDef {
    UnitDef { symbol, quantity, dimension: Dimension::from_ints(e), scale, prefixable }
}

//                                     kg  m   s   A   K  mol cd
const MASS: [i32; 7] = [1, 0, 0, 0, 0, 0, 0];
const LENGTH: [i32; 7] = [0, 1, 0, 0, 0, 0, 0];
const TIME: [i32; 7] = [0, 0, 1, 0, 0, 0, 0];
const ONE: [i32; 7] = [0; 7];
const PER_TIME: [i32; 7] = [0, 0, -1, 0, 0, 0, 0];
const FORCE: [i32; 7] = [1, 1, -2, 0, 0, 0, 0];
const PRESSURE: [i32; 7] = [1, -1, -2, 0, 0, 0, 0];
const ENERGY: [i32; 7] = [1, 2, -2, 0, 0, 0, 0];
const POWER: [i32; 7] = [1, 2, -3, 0, 0, 0, 0];

/// The unit table; see the module docs for the same table in prose.
pub const UNITS: &[UnitDef] = &[
    def("m", "length", LENGTH, 1.0, true),
    def("g", "mass", MASS, 1e-3, true),
    def("t", "mass (tonne)", MASS, 1e3, false),
    def("s", "time", TIME, 1.0, true),
    def("min", "time", TIME, 60.0, false),
    def("h", "time", TIME, 3600.0, false),
    def("day", "time", TIME, 86400.0, false),
    def("A", "electric current", [0, 0, 0, 1, 0, 0, 0], 1.0, true),
    def("K", "temperature", [0, 0, 0, 0, 1, 0, 0], 1.0, true),
    def("mol", "amount of substance", [0, 0, 0, 0, 0, 1, 0], 1.0, true),
    def("cd", "luminous intensity", [0, 0, 0, 0, 0, 0, 1], 1.0, false),
    def("rad", "angle", ONE, 1.0, true),
    def("deg", "angle", ONE, std::f64::consts::PI / 180.0, false),
    def("percent", "ratio", ONE, 0.01, false),
    def("Hz", "frequency", PER_TIME, 1.0, true),
    def("rpm", "rotational speed", PER_TIME, std::f64::consts::PI / 30.0, false),
    def("N", "force", FORCE, 1.0, true),
    def("Pa", "pressure", PRESSURE, 1.0, true),
    def("bar", "pressure", PRESSURE, 1e5, true),
    def("J", "energy", ENERGY, 1.0, true),
    def("Wh", "energy", ENERGY, 3600.0, true),
    def("W", "power", POWER, 1.0, true),
    def("C", "electric charge", [0, 0, 1, 1, 0, 0, 0], 1.0, true),
    def("V", "voltage", [1, 2, -3, -1, 0, 0, 0], 1.0, true),
    def("Ohm", "electric resistance", [1, 2, -3, -2, 0, 0, 0], 1.0, true),
    def("L", "volume", [0, 3, 0, 0, 0, 0, 0], 1e-3, true),
];

/// SI prefixes accepted in front of a prefixable unit.
pub const PREFIXES: &[(&str, f64)] = &[
    ("G", 1e9),
    ("M", 1e6),
    ("k", 1e3),
    ("h", 1e2),
    ("c", 1e-2),
    ("m", 1e-3),
    ("u", 1e-6),
    ("n", 1e-9),
];

/// Prefixed symbols offered by "did you mean" besides the bare table symbols.
const COMMON_PREFIXED: &[&str] = &[
    "km", "cm", "mm", "kg", "mg", "ms", "kN", "kJ", "MJ", "kW", "MW", "kWh", "kPa", "MPa", "mbar",
];

/// Looks up one unit symbol, with an optional SI prefix: `km` -> (length, 1000).
pub fn lookup(symbol: &str) -> Option<(Dimension, f64)> {
    if let Some(d) = UNITS.iter().find(|d| d.symbol == symbol) {
        return Some((d.dimension, d.scale));
    }
    PREFIXES.iter().find_map(|(p, f)| {
        let rest = symbol.strip_prefix(p)?;
        let d = UNITS.iter().find(|d| d.prefixable && d.symbol == rest)?;
        Some((d.dimension, d.scale * f))
    })
}

/// A known unit symbol close to `symbol`, for "did you mean".
pub fn suggest(symbol: &str) -> Option<&'static str> {
    let candidates = UNITS.iter().map(|d| d.symbol).chain(COMMON_PREFIXED.iter().copied());
    costate_syntax::closest_name(symbol, candidates)
}

/// A unit symbol that is not in the table.
#[derive(Clone, Debug, PartialEq)]
pub struct UnknownUnit {
    pub symbol: String,
    pub span: Span,
    pub suggestion: Option<&'static str>,
}

/// Converts a bracketed unit to a [`Unit`]; every unknown symbol is reported.
pub fn parse_unit(u: &UnitExpr) -> Result<Unit, Vec<UnknownUnit>> {
    let mut dimension = Dimension::NONE;
    let mut scale = 1.0;
    let mut unknown = Vec::new();
    for f in &u.factors {
        match lookup(&f.name.name) {
            Some((d, s)) => {
                let r = Ratio::integer(f.exponent);
                match d.checked_pow(r).and_then(|d| dimension.checked_mul(&d)) {
                    Some(d) => dimension = d,
                    None => unknown.push(UnknownUnit {
                        symbol: f.name.name.clone(),
                        span: f.span,
                        suggestion: None,
                    }),
                }
                scale *= s.powi(f.exponent);
            }
            None => unknown.push(UnknownUnit {
                symbol: f.name.name.clone(),
                span: f.name.span,
                suggestion: suggest(&f.name.name),
            }),
        }
    }
    if unknown.is_empty() {
        Ok(Unit { dimension, scale, display: display(u) })
    } else {
        Err(unknown)
    }
}

/// The normalised text of a unit: positive exponents first, then `/` and the negative ones.
pub fn display(u: &UnitExpr) -> String {
    let show = |name: &str, e: i32| if e == 1 { name.to_string() } else { format!("{name}^{e}") };
    let num: Vec<String> = u
        .factors
        .iter()
        .filter(|f| f.exponent > 0)
        .map(|f| show(&f.name.name, f.exponent))
        .collect();
    let den: Vec<String> = u
        .factors
        .iter()
        .filter(|f| f.exponent < 0)
        .map(|f| show(&f.name.name, f.exponent.saturating_neg()))
        .collect();
    let num = if num.is_empty() { "1".to_string() } else { num.join("*") };
    match den.len() {
        0 => num,
        1 => format!("{num}/{}", den[0]),
        _ => format!("{num}/({})", den.join("*")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use costate_syntax::ast::{Ident, UnitFactor};

    fn unit(factors: &[(&str, i32)]) -> UnitExpr {
        UnitExpr {
            factors: factors
                .iter()
                .map(|(n, e)| UnitFactor {
                    name: Ident { name: n.to_string(), span: Span::new(0, 1) },
                    exponent: *e,
                    span: Span::new(0, 1),
                })
                .collect(),
            span: Span::new(0, 1),
        }
    }

    fn close(a: f64, b: f64) -> bool {
        // Conversion factors are products of a few exact decimals: 1e-12 relative is ample.
        (a - b).abs() <= 1e-12 * b.abs().max(1.0)
    }

    #[test]
    fn kilonewton_is_a_thousand_kg_m_per_s2() {
        let u = parse_unit(&unit(&[("kN", 1)])).unwrap();
        assert_eq!(u.dimension, Dimension::from_ints([1, 1, -2, 0, 0, 0, 0]));
        assert!(close(u.scale, 1000.0));
        assert_eq!(u.dimension.to_string(), "kg*m/s^2");
    }

    #[test]
    fn km_per_hour_is_one_over_3_6_m_per_s() {
        let u = parse_unit(&unit(&[("km", 1), ("h", -1)])).unwrap();
        assert_eq!(u.dimension.to_string(), "m/s");
        assert!(close(u.scale, 1.0 / 3.6));
        assert_eq!(u.display, "km/h");
    }

    #[test]
    fn degrees_are_dimensionless_with_factor_pi_over_180() {
        let u = parse_unit(&unit(&[("deg", 1)])).unwrap();
        assert!(u.dimension.is_dimensionless());
        assert!(close(u.scale, std::f64::consts::PI / 180.0));
    }

    #[test]
    fn exact_symbols_win_over_prefixed_readings() {
        assert_eq!(lookup("min"), Some((Dimension::base(Base::Time), 60.0)));
        assert_eq!(lookup("h"), Some((Dimension::base(Base::Time), 3600.0)));
        assert_eq!(lookup("mol").map(|x| x.1), Some(1.0));
        assert_eq!(lookup("cd").map(|x| x.0), Some(Dimension::base(Base::Luminosity)));
        assert!(close(lookup("mm").unwrap().1, 1e-3));
        assert!(close(lookup("kg").unwrap().1, 1.0));
        assert!(close(lookup("kWh").unwrap().1, 3.6e6));
        assert!(close(lookup("hPa").unwrap().1, 100.0));
        assert_eq!(lookup("kmin"), None, "minutes take no prefix");
        assert_eq!(lookup("kt"), None, "tonnes take no prefix");
        assert_eq!(lookup("Tm"), None, "tera is not offered");
    }

    #[test]
    fn compound_units_multiply_dimensions_and_scales() {
        let u = parse_unit(&unit(&[("J", 1), ("mol", -1), ("K", -1)])).unwrap();
        assert_eq!(u.dimension.to_string(), "kg*m^2/(s^2*K*mol)");
        let u = parse_unit(&unit(&[("mol", 1), ("L", -1)])).unwrap();
        assert_eq!(u.dimension.to_string(), "mol/m^3");
        assert!(close(u.scale, 1000.0));
        let u = parse_unit(&unit(&[("W", 1), ("N", -2)])).unwrap();
        assert_eq!(u.dimension.to_string(), "s/kg");
        let u = parse_unit(&unit(&[("rpm", 1)])).unwrap();
        assert_eq!(u.dimension.to_string(), "1/s");
        assert!(close(u.scale * 60.0, 2.0 * std::f64::consts::PI));
        let u = parse_unit(&unit(&[])).unwrap();
        assert!(u.dimension.is_dimensionless());
        assert_eq!(u.display, "1");
    }

    #[test]
    fn unknown_symbols_are_all_reported_with_suggestions() {
        let err = parse_unit(&unit(&[("kmh", 1), ("s", 1), ("sx", -1)])).unwrap_err();
        assert_eq!(err.len(), 2);
        assert_eq!(err[0].symbol, "kmh");
        assert_eq!(err[1].suggestion, Some("s"));
    }

    #[test]
    fn square_roots_halve_exponents() {
        let area = Dimension::from_ints([0, 2, 0, 0, 0, 0, 0]);
        let half = Ratio::new(1, 2).unwrap();
        assert_eq!(area.checked_pow(half).unwrap(), Dimension::base(Base::Length));
        let length = Dimension::base(Base::Length);
        assert_eq!(length.checked_pow(half).unwrap().to_string(), "m^(1/2)");
        assert_eq!(Ratio::from_f64(1.0 / 3.0), Ratio::new(1, 3));
        assert_eq!(Ratio::from_f64(0.123456), None);
    }

    #[test]
    fn dimensions_print_numerator_then_denominator() {
        assert_eq!(Dimension::NONE.to_string(), "1");
        assert_eq!(Dimension::from_ints([0, 0, -1, 0, 0, 0, 0]).to_string(), "1/s");
        assert_eq!(Dimension::from_ints([0, 1, -2, 0, 0, 0, 0]).to_string(), "m/s^2");
    }
}
