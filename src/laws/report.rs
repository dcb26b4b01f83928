//! What a law check found: which laws held, and for each broken one the
//! smallest case found, the two sides, the error and the tolerance.

use super::case::{Case, Drawn};
use super::judge::Discrepancy;
use super::law::{CaseValue, Law};
use std::any::Any;
use std::fmt;

/// One broken law: the law, the order it was checked at, the case (shrunk
/// by proptest in a sampled check; the first in enumeration order in an
/// exhaustive one) and the breach.
pub struct Violation {
    /// The law.
    pub law: Law,
    /// 1 for the map itself, 2 for the law applied to its reverse
    /// derivative `R[f]` at the input `(x, w)` (see
    /// [`Case::lift`](crate::laws::Case::lift)).
    pub order: u8,
    /// The values the law was broken at, by name, as the report shows them.
    pub shown: Vec<(CaseValue, String)>,
    /// The two sides, the error and the tolerance.
    pub breach: Discrepancy,
    drawn: Option<Box<dyn Any>>,
}

impl Violation {
    pub(crate) fn new<A: 'static, B: 'static>(
        law: Law,
        order: u8,
        shown: Vec<(CaseValue, String)>,
        breach: Discrepancy,
        drawn: Drawn<A, B>,
    ) -> Self {
        Violation {
            law,
            order,
            shown,
            breach,
            drawn: Some(Box::new(drawn)),
        }
    }

    pub(crate) fn without_case(law: Law, order: u8, breach: Discrepancy) -> Self {
        Violation {
            law,
            order,
            shown: Vec::new(),
            breach,
            drawn: None,
        }
    }

    /// The case the law was broken at, typed: `A` the input space, `B` the
    /// output space of the checked map. `None` if the types are not those,
    /// or if the map could not be evaluated at the input at all (then see
    /// [`input`](Self::input)).
    pub fn case<A: 'static, B: 'static>(&self) -> Option<&Case<A, B>> {
        match self.drawn.as_ref()?.downcast_ref::<Drawn<A, B>>()? {
            Drawn::Case(c) => Some(c),
            Drawn::Unevaluable { .. } => None,
        }
    }

    /// The input the law was broken at, typed as in [`case`](Self::case).
    pub fn input<A: 'static, B: 'static>(&self) -> Option<&A> {
        match self.drawn.as_ref()?.downcast_ref::<Drawn<A, B>>()? {
            Drawn::Case(c) => Some(&c.x),
            Drawn::Unevaluable { x, .. } => Some(x),
        }
    }
}

impl fmt::Debug for Violation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Violation")
            .field("law", &self.law)
            .field("order", &self.order)
            .field("shown", &self.shown)
            .field("breach", &self.breach)
            .finish_non_exhaustive()
    }
}

impl fmt::Display for Violation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let at = if self.order == 2 {
            ", order 2 (applied to R[f] at the input (x, w))"
        } else {
            ""
        };
        writeln!(f, "BROKEN {}{at}", self.law)?;
        writeln!(f, "    law          {}", self.law.statement())?;
        for (slot, value) in &self.shown {
            let label = format!("{} {}", slot.role(), slot.name());
            writeln!(f, "    {label:<18} {value}")?;
        }
        if !self.breach.expected.is_empty() {
            writeln!(f, "    expected     {}", self.breach.expected)?;
            writeln!(f, "    observed     {}", self.breach.observed)?;
        }
        if let (Some(e), Some(t)) = (self.breach.error, self.breach.tolerance) {
            writeln!(f, "    error        {e:.3e}, allowed {t:.3e}")?;
        }
        writeln!(f, "    measure      {}", self.breach.measure)
    }
}

/// A law that was checked, how often, and whether it held.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Checked {
    /// The law.
    pub law: Law,
    /// The order it was checked at.
    pub order: u8,
    /// The cases it held at (up to the first violation, if any).
    pub cases: u64,
    /// The cases at which the checker could not decide (see
    /// [`Undecided`]).
    pub undecided: u64,
    /// Whether it held at every case that was decided.
    pub held: bool,
}

/// Cases at which a law could not be decided: the map is too
/// ill-conditioned there for the precision, so the check neither passes
/// nor fails them (see [`Tolerance`](crate::laws::Tolerance)). The report
/// keeps the first such case and its reason.
#[derive(Clone, Debug, PartialEq)]
pub struct Undecided {
    /// The law.
    pub law: Law,
    /// The order it was checked at.
    pub order: u8,
    /// How many cases were undecided.
    pub cases: u64,
    /// Why, at the first of them.
    pub reason: String,
    /// The values of the first of them, by name.
    pub shown: Vec<(CaseValue, String)>,
}

impl fmt::Display for Undecided {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let at = if self.order == 2 { ", order 2" } else { "" };
        let s = if self.cases == 1 { "" } else { "s" };
        writeln!(f, "UNDECIDED {}{at}, at {} case{s}", self.law, self.cases)?;
        writeln!(f, "    first reason {}", self.reason)?;
        for (slot, value) in &self.shown {
            let label = format!("{} {}", slot.role(), slot.name());
            writeln!(f, "    {label:<18} {value}")?;
        }
        Ok(())
    }
}

/// The result of a law check: one entry per law and order checked, and a
/// [`Violation`] for each broken one.
///
/// Its `Display` is the report to read; [`assert_clean`](Self::assert_clean)
/// panics with it, which is what a `#[test]` wants.
///
/// ```
/// use revdiff::laws::{Checker, Law};
/// use revdiff::Sin;
///
/// let report = Checker::new().reverse(&Sin, -3.0..3.0f64);
/// assert!(report.is_clean());
/// assert!(report.checked().iter().any(|c| c.law == Law::Symmetric && c.order == 2));
/// ```
#[derive(Debug)]
pub struct LawReport {
    subject: String,
    mode: String,
    checked: Vec<Checked>,
    violations: Vec<Violation>,
    undecided: Vec<Undecided>,
}

impl LawReport {
    pub(crate) fn new(subject: String, mode: String) -> Self {
        LawReport {
            subject,
            mode,
            checked: Vec::new(),
            violations: Vec::new(),
            undecided: Vec::new(),
        }
    }

    pub(crate) fn record(
        &mut self,
        law: Law,
        order: u8,
        cases: u64,
        undecided: Option<Undecided>,
        violation: Option<Violation>,
    ) {
        self.checked.push(Checked {
            law,
            order,
            cases,
            undecided: undecided.as_ref().map_or(0, |u| u.cases),
            held: violation.is_none(),
        });
        self.violations.extend(violation);
        self.undecided.extend(undecided);
    }

    /// Appends another report's findings (for a check made of several).
    pub fn merge(mut self, other: LawReport) -> Self {
        self.checked.extend(other.checked);
        self.violations.extend(other.violations);
        self.undecided.extend(other.undecided);
        self
    }

    /// True if no law was broken at any case. Undecided cases do not count
    /// against it; see [`is_decided`](Self::is_decided).
    pub fn is_clean(&self) -> bool {
        self.violations.is_empty()
    }

    /// True if every case of every law was decided.
    pub fn is_decided(&self) -> bool {
        self.undecided.is_empty()
    }

    /// The laws with undecided cases.
    pub fn undecided(&self) -> &[Undecided] {
        &self.undecided
    }

    /// The undecided cases of `law` at `order`, if there were any.
    pub fn undecided_of(&self, law: Law, order: u8) -> Option<&Undecided> {
        self.undecided
            .iter()
            .find(|u| u.law == law && u.order == order)
    }

    /// The broken laws.
    pub fn violations(&self) -> &[Violation] {
        &self.violations
    }

    /// The violation of `law` at `order`, if it was broken.
    pub fn violation(&self, law: Law, order: u8) -> Option<&Violation> {
        self.violations
            .iter()
            .find(|v| v.law == law && v.order == order)
    }

    /// Every law and order checked.
    pub fn checked(&self) -> &[Checked] {
        &self.checked
    }

    /// What was checked: the map's type, shortened.
    pub fn subject(&self) -> &str {
        &self.subject
    }

    /// Panics with the report if a law was broken.
    #[track_caller]
    pub fn assert_clean(&self) {
        if !self.is_clean() {
            panic!("{self}");
        }
    }
}

impl fmt::Display for LawReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let broken = self.violations.len();
        write!(
            f,
            "law check of {} ({}): {} of {} checks broken",
            self.subject,
            self.mode,
            broken,
            self.checked.len()
        )?;
        match self.undecided.len() {
            0 => writeln!(f)?,
            n => writeln!(f, ", {n} with undecided cases")?,
        }
        for v in &self.violations {
            writeln!(f)?;
            write!(f, "{v}")?;
        }
        for u in &self.undecided {
            writeln!(f)?;
            write!(f, "{u}")?;
        }
        let held: Vec<&Checked> = self.checked.iter().filter(|c| c.held).collect();
        if !held.is_empty() {
            writeln!(f)?;
            writeln!(f, "held:")?;
            for c in held {
                write!(f, "    {}, order {}, {} cases", c.law, c.order, c.cases)?;
                match c.undecided {
                    0 => writeln!(f)?,
                    n => writeln!(f, " ({n} more undecided)")?,
                }
            }
        }
        Ok(())
    }
}

/// The type name of `T` without module paths:
/// `revdiff::combinators::compose::Then<revdiff::primitives::pointwise::Exp, ...>`
/// becomes `Then<Exp, ...>`.
pub(crate) fn short_type_name<T: ?Sized>() -> String {
    let full = std::any::type_name::<T>();
    let mut out = String::with_capacity(full.len());
    let mut segment = String::new();
    for ch in full.chars() {
        if ch.is_alphanumeric() || ch == '_' || ch == ':' {
            segment.push(ch);
        } else {
            out.push_str(segment.rsplit("::").next().unwrap_or(""));
            segment.clear();
            out.push(ch);
        }
    }
    out.push_str(segment.rsplit("::").next().unwrap_or(""));
    out
}

#[cfg(test)]
mod tests {
    use super::short_type_name;

    #[test]
    fn type_names_lose_their_paths() {
        assert_eq!(
            short_type_name::<crate::Then<crate::Exp, crate::Sin>>(),
            "Then<Exp, Sin>"
        );
        assert_eq!(short_type_name::<(f64, Vec<u8>)>(), "(f64, Vec<u8>)");
    }
}
