//! The laws themselves: names, statements and which drawn values each one
//! quantifies over.

use std::fmt;

/// A law of reverse derivatives that the checkers test.
///
/// Laws 1 to 6 concern one map `f`; the rest compare a map `h` with maps it
/// is claimed to equal. Statements use the names of the drawn values: `x`
/// the input, `v` and `u` input changes, `w` and `w2` output changes, `s` a
/// real scalar (see [`Case`](crate::laws::Case)).
///
/// ```
/// use revdiff::laws::Law;
///
/// assert_eq!(Law::Derivative.number(), Some(2));
/// assert!(Law::Derivative.statement().contains("<R[f](x, w), v>"));
/// assert_eq!(Law::Derivative.to_string(), "derivative (law 2)");
/// ```
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum Law {
    /// Law 1: the backward map is additive in the output change.
    Additive,
    /// Law 1: a zero output change goes to a zero input change.
    ZeroChange,
    /// Law 1: for real spaces, the backward map is homogeneous in the change.
    Homogeneous,
    /// Law 2: the backward map is the transposed derivative of the forward
    /// map, against central differences of the forward map.
    Derivative,
    /// Law 3: mixed second partial derivatives are symmetric.
    Symmetric,
    /// Law 4: the reverse derivative of `R[f]` in the change direction gives
    /// back `R[f]` (the derivative is linear in the change).
    LinearInChange,
    /// Law 5: the reverse derivative as a map agrees with the backward pass.
    ReverseAgrees,
    /// Law 6: the backward pass returns the input's shape, and forward and
    /// backward values are finite.
    ShapesFinite,
    /// Law 7: the reusing passes ([`Map::forward_reusing`](crate::Map::forward_reusing),
    /// `backward_reusing`, `backward_reusing_adding`), into a workspace
    /// already filled at another point, give what the memo passes give.
    ReusingAgrees,
    /// A map `h` claimed equal to `f` then `g` obeys the chain rule.
    ChainRule,
    /// A map `h` claimed equal to the pairing `<f, g>` has the summed
    /// backward pass.
    Pairing,
    /// A map `h` claimed equal to `<f, g>` puts zero in the slot of a zero
    /// output change: the projections of the pair.
    Projection,
    /// A map `h` claimed equal to `f + g` has the summed backward pass.
    SumRule,
    /// Two maps claimed equal agree in values and backward passes (and, at
    /// order 2, in their second reverse derivatives).
    SameMap,
}

/// One of the drawn values of a [`Case`](crate::laws::Case).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum CaseValue {
    /// The input `x`.
    X,
    /// The input change `v`.
    V,
    /// The second input change `u`.
    U,
    /// The output change `w`.
    W,
    /// The second output change `w2`.
    W2,
    /// The real scalar `s`.
    S,
}

impl CaseValue {
    /// The name used in law statements and reports.
    pub fn name(self) -> &'static str {
        match self {
            CaseValue::X => "x",
            CaseValue::V => "v",
            CaseValue::U => "u",
            CaseValue::W => "w",
            CaseValue::W2 => "w2",
            CaseValue::S => "s",
        }
    }

    /// What the value is, for reports.
    pub fn role(self) -> &'static str {
        match self {
            CaseValue::X => "input",
            CaseValue::V | CaseValue::U => "input change",
            CaseValue::W | CaseValue::W2 => "output change",
            CaseValue::S => "scalar",
        }
    }
}

impl Law {
    /// The single-map laws checked on a map without a reverse map
    /// ([`Checker::map`](crate::laws::Checker::map)).
    ///
    /// Law 4 is absent: for such a map it follows from law 1, since a
    /// backward map that is additive and homogeneous in the change is linear
    /// in it; law 5 needs the reverse map.
    pub const FOR_MAPS: [Law; 7] = [
        Law::Additive,
        Law::ZeroChange,
        Law::Homogeneous,
        Law::Derivative,
        Law::Symmetric,
        Law::ShapesFinite,
        Law::ReusingAgrees,
    ];

    /// The single-map laws checked on a map with a reverse map
    /// ([`Checker::reverse`](crate::laws::Checker::reverse)), at orders 1
    /// and 2.
    pub const FOR_REVERSE: [Law; 9] = [
        Law::Additive,
        Law::ZeroChange,
        Law::Homogeneous,
        Law::Derivative,
        Law::Symmetric,
        Law::LinearInChange,
        Law::ReverseAgrees,
        Law::ShapesFinite,
        Law::ReusingAgrees,
    ];

    /// The law's number in the list of single-map laws, if it is one.
    pub fn number(self) -> Option<u8> {
        match self {
            Law::Additive | Law::ZeroChange | Law::Homogeneous => Some(1),
            Law::Derivative => Some(2),
            Law::Symmetric => Some(3),
            Law::LinearInChange => Some(4),
            Law::ReverseAgrees => Some(5),
            Law::ShapesFinite => Some(6),
            Law::ReusingAgrees => Some(7),
            _ => None,
        }
    }

    /// A short name, also the name of the test the
    /// [`law_tests!`](crate::law_tests) macro generates for it.
    pub fn name(self) -> &'static str {
        match self {
            Law::Additive => "additive",
            Law::ZeroChange => "zero change",
            Law::Homogeneous => "homogeneous",
            Law::Derivative => "derivative",
            Law::Symmetric => "symmetric",
            Law::LinearInChange => "linear in change",
            Law::ReverseAgrees => "reverse agrees",
            Law::ShapesFinite => "shapes and finiteness",
            Law::ReusingAgrees => "reusing agrees",
            Law::ChainRule => "chain rule",
            Law::Pairing => "pairing",
            Law::Projection => "projection",
            Law::SumRule => "sum rule",
            Law::SameMap => "same map",
        }
    }

    /// The law as an equation in the drawn values.
    pub fn statement(self) -> &'static str {
        match self {
            Law::Additive => "R[f](x, w + w2) = R[f](x, w) + R[f](x, w2)",
            Law::ZeroChange => "R[f](x, 0) = 0",
            Law::Homogeneous => "R[f](x, s w) = s R[f](x, w)",
            Law::Derivative => "<R[f](x, w), v> = <w, Df(x) v>",
            Law::Symmetric => "<u, H v> = <v, H u>, where H is the derivative of x -> R[f](x, w)",
            Law::LinearInChange => {
                "<change part of R[R[f]]((x, w), u), w2> = <R[f](x, w2), u>, for every w"
            }
            Law::ReverseAgrees => "rev() at (x, w) = R[f](x, w)",
            Law::ShapesFinite => "R[f](x, w) has the shape of x; f(x) and R[f](x, w) are finite",
            Law::ReusingAgrees => {
                "after a first call at x + v: the reusing passes give f(x) and R[f](x, w), and add R[f](x, w) onto R[f](x, w2)"
            }
            Law::ChainRule => "h(x) = g(f(x)) and R[h](x, w) = R[f](x, R[g](f(x), w))",
            Law::Pairing => {
                "h(x) = (f(x), g(x)) and R[h](x, (w.0, w.1)) = R[f](x, w.0) + R[g](x, w.1)"
            }
            Law::Projection => {
                "R[h](x, (w.0, 0)) = R[f](x, w.0) and R[h](x, (0, w.1)) = R[g](x, w.1)"
            }
            Law::SumRule => "h(x) = f(x) + g(x) and R[h](x, w) = R[f](x, w) + R[g](x, w)",
            Law::SameMap => "a(x) = b(x) and R[a](x, w) = R[b](x, w)",
        }
    }

    /// The drawn values the law quantifies over (the exhaustive checker
    /// enumerates exactly these; a report shows exactly these).
    pub fn slots(self) -> &'static [CaseValue] {
        use CaseValue::*;
        match self {
            Law::Additive => &[X, W, W2],
            Law::ZeroChange => &[X, W],
            Law::Homogeneous => &[X, W, S],
            Law::Derivative => &[X, V, W],
            Law::Symmetric => &[X, V, U, W],
            Law::LinearInChange => &[X, U, W, W2],
            Law::ReverseAgrees | Law::ShapesFinite => &[X, W],
            Law::ReusingAgrees => &[X, V, W, W2],
            Law::ChainRule | Law::Pairing | Law::Projection | Law::SumRule => &[X, W],
            Law::SameMap => &[X, W],
        }
    }

    /// The drawn values the law quantifies over at `order`. At order 2 a
    /// single-map law is evaluated at the lifted case (see
    /// [`Case::lift`](crate::laws::Case::lift)), so it ranges over the values
    /// the lifted slots are made of; [`Law::SameMap`] at order 2 compares
    /// second reverse derivatives, which also need `u`.
    pub fn slots_at(self, order: u8) -> Vec<CaseValue> {
        use CaseValue::*;
        let mut out: Vec<CaseValue> = Vec::new();
        for &slot in self.slots() {
            let made_of: &[CaseValue] = match (order, self, slot) {
                (1, _, _) => &[slot],
                (_, Law::SameMap, _) => &[slot, U],
                (_, _, X) => &[X, W],
                (_, _, V) => &[V, W2],
                (_, _, U) => &[U, W],
                (_, _, W) => &[U],
                (_, _, W2) => &[V],
                (_, _, S) => &[S],
            };
            for s in made_of {
                if !out.contains(s) {
                    out.push(*s);
                }
            }
        }
        out.sort_by_key(|s| *s as u8);
        out
    }
}

impl fmt::Display for Law {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.number() {
            Some(n) => write!(f, "{} (law {n})", self.name()),
            None => f.write_str(self.name()),
        }
    }
}
