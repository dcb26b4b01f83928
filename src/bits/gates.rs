//! The gates over [`Bits`] and their reverse maps, from gates (OR and the
//! multiplexer through equal composites of XOR and AND).

use super::Bits;
use crate::combinators::{Fst, Pair, Snd, Then};
use crate::error::Result;
use crate::map::{Compose, Map, Reverse};
use crate::space::Space;
use crate::workspace::Workspace;

/// `(x, y) -> x + y` (XOR), bit by bit. Reverse derivative: `dz -> (dz, dz)`.
///
/// Truth table (common practice, no source): 0 0 -> 0, 0 1 -> 1, 1 0 -> 1,
/// 1 1 -> 0.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct XorGate;

/// `(x, y) -> x y` (AND), bit by bit. Reverse derivative:
/// `((x, y), dz) -> (y dz, x dz)`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct AndGate;

/// `x -> 1 + x` (NOT), bit by bit. Reverse derivative: `dz -> dz`.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct NotGate;

/// `(x, y) -> x + y + x y` (OR), bit by bit. Its reverse derivative,
/// `((x, y), dz) -> ((1 + y) dz, (1 + x) dz)`, is that of the equal
/// composite of XOR and AND gates.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct OrGate;

/// `(s, (a, b)) -> a + s (a + b)`: `b` where `s` is 1, `a` where it is 0.
/// Its reverse derivative, `((a + b) dz, ((1 + s) dz, s dz))`, is that of
/// the equal composite of gates.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MuxGate;

impl Compose for XorGate {}
impl Compose for AndGate {}
impl Compose for NotGate {}
impl Compose for OrGate {}
impl Compose for MuxGate {}

impl Map<(Bits, Bits)> for XorGate {
    type Output = Bits;
    type Memo = ();
    fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, ())> {
        Ok((x.zip(y, "XOR gate", |a, b| a ^ b)?, ()))
    }
    fn backward_memo(&self, _: &(), dz: &Bits) -> Result<(Bits, Bits)> {
        Ok((dz.clone(), dz.clone()))
    }
    fn forward_reusing<'w>(
        &self,
        (x, y): &(Bits, Bits),
        work: &'w mut Workspace,
    ) -> Result<&'w Bits> {
        x.zip_reusing(y, work, "XOR gate", |a, b| a ^ b)
    }
    fn backward_reusing(
        &self,
        (x, _): &(Bits, Bits),
        _: &mut Workspace,
        dz: &Bits,
        (dx, dy): &mut (Bits, Bits),
    ) -> Result<()> {
        x.same_shape(dz, "the output change of an XOR gate")?;
        dx.assign_from(dz);
        dy.assign_from(dz);
        Ok(())
    }
    fn backward_reusing_adding(
        &self,
        (x, _): &(Bits, Bits),
        _: &mut Workspace,
        dz: &Bits,
        (dx, dy): &mut (Bits, Bits),
    ) -> Result<()> {
        let op = "the output change of an XOR gate";
        x.same_shape(dz, op)?;
        dx.try_add_assign(dz)?;
        dy.try_add_assign(dz)
    }
}

// The AND and OR gates: the output is `value(x, y)`; the change of each
// input is `slope(other input, dz)`, so the passes keep (or are handed
// again) both inputs.
macro_rules! two_input_gate {
    ($gate:ty, $name:literal, |$a:ident, $b:ident| $value:expr, $change_of:literal, |$o:ident, $d:ident| $slope:expr) => {
        impl Map<(Bits, Bits)> for $gate {
            type Output = Bits;
            type Memo = (Bits, Bits);
            fn forward_memo(&self, (x, y): &(Bits, Bits)) -> Result<(Bits, (Bits, Bits))> {
                Ok((x.zip(y, $name, |$a, $b| $value)?, (x.clone(), y.clone())))
            }
            fn backward_memo(&self, (x, y): &(Bits, Bits), dz: &Bits) -> Result<(Bits, Bits)> {
                Ok((
                    y.zip(dz, $change_of, |$o, $d| $slope)?,
                    x.zip(dz, $change_of, |$o, $d| $slope)?,
                ))
            }
            // The reusing passes keep no copies: the inputs come again.
            fn forward_reusing<'w>(
                &self,
                (x, y): &(Bits, Bits),
                work: &'w mut Workspace,
            ) -> Result<&'w Bits> {
                x.zip_reusing(y, work, $name, |$a, $b| $value)
            }
            fn backward_reusing(
                &self,
                (x, y): &(Bits, Bits),
                _: &mut Workspace,
                dz: &Bits,
                (dx, dy): &mut (Bits, Bits),
            ) -> Result<()> {
                y.zip_into(dz, dx, $change_of, |$o, $d| $slope)?;
                x.zip_into(dz, dy, $change_of, |$o, $d| $slope)
            }
            fn backward_reusing_adding(
                &self,
                (x, y): &(Bits, Bits),
                _: &mut Workspace,
                dz: &Bits,
                (dx, dy): &mut (Bits, Bits),
            ) -> Result<()> {
                y.zip_adding(dz, dx, $change_of, |$o, $d| $slope)?;
                x.zip_adding(dz, dy, $change_of, |$o, $d| $slope)
            }
        }
    };
}

two_input_gate!(
    AndGate,
    "AND gate",
    |a, b| a & b,
    "the output change of an AND gate",
    |other, dz| other & dz
);

/// `((x, y), dz) -> (y dz, x dz)` from gates.
pub type AndGateRev =
    Pair<Then<Pair<Then<Fst, Snd>, Snd>, AndGate>, Then<Pair<Then<Fst, Fst>, Snd>, AndGate>>;

impl Map<Bits> for NotGate {
    type Output = Bits;
    type Memo = ();
    fn forward_memo(&self, x: &Bits) -> Result<(Bits, ())> {
        Ok((x.complement(), ()))
    }
    fn backward_memo(&self, _: &(), dz: &Bits) -> Result<Bits> {
        Ok(dz.clone())
    }
}

/// `x + y + x y` from gates.
pub type OrComposite = Then<Pair<XorGate, AndGate>, XorGate>;

impl OrGate {
    /// The equal composite of XOR and AND gates.
    pub fn composite(&self) -> OrComposite {
        XorGate.pair(AndGate).then(XorGate)
    }
}

// OR is x + y + xy: the change of x is (1 + y) dz.
two_input_gate!(
    OrGate,
    "OR gate",
    |a, b| a | b,
    "the output change of an OR gate",
    |other, dz| !other & dz
);

/// `a + s (a + b)` from gates, on `(s, (a, b))`.
pub type MuxComposite =
    Then<Pair<Then<Snd, Fst>, Then<Pair<Fst, Then<Snd, XorGate>>, AndGate>>, XorGate>;

impl MuxGate {
    /// The equal composite of XOR and AND gates.
    pub fn composite(&self) -> MuxComposite {
        Snd.then(Fst)
            .pair(Fst.pair(Snd.then(XorGate)).then(AndGate))
            .then(XorGate)
    }
}

type MuxInput = (Bits, (Bits, Bits));

impl Map<MuxInput> for MuxGate {
    type Output = Bits;
    type Memo = MuxInput;
    fn forward_memo(&self, input: &MuxInput) -> Result<(Bits, MuxInput)> {
        let (s, (a, b)) = input;
        s.same_shape(a, "multiplexer, its selector against its first input")?;
        a.same_shape(b, "multiplexer inputs")?;
        let words = s
            .words
            .iter()
            .zip(&a.words)
            .zip(&b.words)
            .map(|((s, a), b)| (a & !s) | (b & s))
            .collect();
        let chosen = Bits {
            wires: a.wires,
            examples: a.examples,
            words,
        };
        Ok((chosen, input.clone()))
    }
    fn backward_memo(&self, (s, (a, b)): &MuxInput, dz: &Bits) -> Result<MuxInput> {
        let op = "the output change of a multiplexer";
        Ok((
            a.zip(b, op, |a, b| a ^ b)?.zip(dz, op, |d, z| d & z)?,
            (s.zip(dz, op, |s, z| !s & z)?, s.zip(dz, op, |s, z| s & z)?),
        ))
    }
}

// The gates' reverse maps, from gates, over `Bits` and over `Word`s alike.
macro_rules! gate_reverse_maps {
    ($v:ty) => {
        impl Reverse<($v, $v)> for XorGate {
            type Rev = $crate::combinators::Then<$crate::combinators::Snd, $crate::Duplicate>;
            fn rev(&self) -> Self::Rev {
                $crate::Compose::then($crate::combinators::Snd, $crate::Duplicate)
            }
        }
        impl Reverse<($v, $v)> for AndGate {
            type Rev = $crate::bits::AndGateRev;
            fn rev(&self) -> $crate::bits::AndGateRev {
                use $crate::Compose;
                use $crate::combinators::{Fst, Pair, Snd};
                Pair::new(
                    Fst.then(Snd).pair(Snd).then(AndGate),
                    Fst.then(Fst).pair(Snd).then(AndGate),
                )
            }
        }
        impl Reverse<$v> for NotGate {
            type Rev = $crate::combinators::Snd;
            fn rev(&self) -> Self::Rev {
                $crate::combinators::Snd
            }
        }
        impl Reverse<($v, $v)> for OrGate {
            type Rev = <$crate::bits::OrComposite as Reverse<($v, $v)>>::Rev;
            fn rev(&self) -> Self::Rev {
                <$crate::bits::OrComposite as Reverse<($v, $v)>>::rev(&self.composite())
            }
        }
        impl Reverse<($v, ($v, $v))> for MuxGate {
            type Rev = <$crate::bits::MuxComposite as Reverse<($v, ($v, $v))>>::Rev;
            fn rev(&self) -> Self::Rev {
                <$crate::bits::MuxComposite as Reverse<($v, ($v, $v))>>::rev(&self.composite())
            }
        }
    };
}
pub(crate) use gate_reverse_maps;

gate_reverse_maps!(Bits);
