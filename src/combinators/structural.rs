//! The structural maps: identity, projections, copy, addition, the map to
//! `()`, zero, constants and scaling. Their reverse derivatives are built from
//! structural maps only, so every order of reverse derivative stays here.

use crate::combinators::{Pair, Then};
use crate::dynamic::ScalarStages;
use crate::error::Result;
use crate::map::{Compose, Linear, Map, Reverse};
use crate::space::{Scalable, Space};

macro_rules! compose_for {
    ($($t:ident),*) => {$( impl Compose for $t {} )*};
}

/// The identity map `x -> x`. Created by [`id`].
///
/// ```
/// use revdiff::{id, Map};
/// assert_eq!(id().backward(&2.0, &3.0).unwrap(), 3.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Id;

/// The identity map.
pub fn id() -> Id {
    Id
}

/// The first projection `(a, b) -> a`. Created by [`fst`]; its backward puts
/// a zero in the second slot.
///
/// ```
/// use revdiff::{fst, Map};
/// assert_eq!(fst().backward(&(1.0, 2.0), &5.0).unwrap(), (5.0, 0.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Fst;

/// The first projection.
pub fn fst() -> Fst {
    Fst
}

/// The second projection `(a, b) -> b`. Created by [`snd`]; its backward
/// puts a zero in the first slot.
///
/// ```
/// use revdiff::{snd, Map};
/// assert_eq!(snd().backward(&(1.0, 2.0), &5.0).unwrap(), (0.0, 5.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Snd;

/// The second projection.
pub fn snd() -> Snd {
    Snd
}

/// The diagonal copy `x -> (x, x)`. Created by [`duplicate`]; its backward
/// adds the two changes.
///
/// ```
/// use revdiff::{duplicate, Map};
/// assert_eq!(duplicate().backward(&1.0, &(2.0, 3.0)).unwrap(), 5.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Duplicate;

/// The diagonal copy.
pub fn duplicate() -> Duplicate {
    Duplicate
}

/// The addition of a space, `(a, b) -> a + b`, on any [`Space`]. Created by
/// [`add_pair`]; its backward copies the change to both slots.
///
/// ```
/// use revdiff::{add_pair, Map};
/// assert_eq!(add_pair().forward(&(1.0, 2.0)).unwrap(), 3.0);
/// assert_eq!(add_pair().backward(&(1.0, 2.0), &4.0).unwrap(), (4.0, 4.0));
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct AddPair;

/// The addition of a space.
pub fn add_pair() -> AddPair {
    AddPair
}

/// The map to the terminal space, `x -> ()`. Created by [`discard`].
///
/// ```
/// use revdiff::{discard, Map};
/// assert_eq!(discard().backward(&7.0, &()).unwrap(), 0.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Discard;

/// The map to `()`.
pub fn discard() -> Discard {
    Discard
}

/// The zero map `x -> 0`, the zero shaped like its input. Created by
/// [`zero_map`].
///
/// ```
/// use revdiff::{zero_map, Map};
/// use ndarray::array;
/// assert_eq!(zero_map().forward(&array![1.0, 2.0]).unwrap(), array![0.0, 0.0]);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ZeroMap;

/// The zero map.
pub fn zero_map() -> ZeroMap {
    ZeroMap
}

/// The constant map `x -> c`. Created by [`constant`].
///
/// ```
/// use revdiff::{constant, Map};
/// let c = constant(4.0_f64);
/// assert_eq!(c.forward(&1.0_f64).unwrap(), 4.0);
/// assert_eq!(c.backward(&1.0_f64, &9.0).unwrap(), 0.0);
/// ```
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Constant<B>(pub B);

/// The constant map with value `c`.
pub fn constant<B>(c: B) -> Constant<B> {
    Constant(c)
}

/// Multiplication by a fixed scalar, `x -> s x`. Created by [`multiply_by`].
///
/// ```
/// use revdiff::{multiply_by, Map};
/// assert_eq!(multiply_by(3.0).backward(&1.0, &2.0).unwrap(), 6.0);
/// ```
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MultiplyBy<S>(pub S);

/// MultiplyBy by `s`.
pub fn multiply_by<S>(s: S) -> MultiplyBy<S> {
    MultiplyBy(s)
}

compose_for!(Fst, Snd, Duplicate, AddPair, Discard, ZeroMap);
impl<B> Compose for Constant<B> {}

// On one real number the identity is no stage at all, and scaling by a
// number of the same type is one (see `ScalarStages`).
impl Compose for Id {
    fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
        let _ = into;
        true
    }
}

impl<S: Copy + 'static> Compose for MultiplyBy<S> {
    fn scalar_stages(&self, into: &mut ScalarStages) -> bool {
        into.push_either::<MultiplyBy<f64>, MultiplyBy<f32>>(self)
    }
}

impl<A: Space> Map<A> for Id {
    type Output = A;
    type Memo = ();
    fn forward(&self, x: &A) -> Result<A> {
        Ok(x.clone())
    }
    fn forward_memo(&self, x: &A) -> Result<(A, ())> {
        Ok((x.clone(), ()))
    }
    fn backward_memo(&self, _: &(), dy: &A) -> Result<A> {
        Ok(dy.clone())
    }
}

impl<A: Space> Reverse<A> for Id {
    type Rev = Snd;
    fn rev(&self) -> Snd {
        Snd
    }
}

impl<A: Space, B: Space> Map<(A, B)> for Fst {
    type Output = A;
    type Memo = B::Shape;
    fn forward(&self, x: &(A, B)) -> Result<A> {
        Ok(x.0.clone())
    }
    fn forward_memo(&self, x: &(A, B)) -> Result<(A, B::Shape)> {
        Ok((x.0.clone(), x.1.shape()))
    }
    fn backward_memo(&self, shape_b: &B::Shape, da: &A) -> Result<(A, B)> {
        Ok((da.clone(), B::zero_of(shape_b)))
    }
}

impl<A: Space, B: Space> Reverse<(A, B)> for Fst {
    // ((a, b), da) -> (da, 0_b)
    type Rev = Pair<Snd, Then<Then<Fst, Snd>, ZeroMap>>;
    fn rev(&self) -> Self::Rev {
        Snd.pair(Fst.then(Snd).then(ZeroMap))
    }
}

impl<A: Space, B: Space> Map<(A, B)> for Snd {
    type Output = B;
    type Memo = A::Shape;
    fn forward(&self, x: &(A, B)) -> Result<B> {
        Ok(x.1.clone())
    }
    fn forward_memo(&self, x: &(A, B)) -> Result<(B, A::Shape)> {
        Ok((x.1.clone(), x.0.shape()))
    }
    fn backward_memo(&self, shape_a: &A::Shape, db: &B) -> Result<(A, B)> {
        Ok((A::zero_of(shape_a), db.clone()))
    }
}

impl<A: Space, B: Space> Reverse<(A, B)> for Snd {
    // ((a, b), db) -> (0_a, db)
    type Rev = Pair<Then<Then<Fst, Fst>, ZeroMap>, Snd>;
    fn rev(&self) -> Self::Rev {
        Fst.then(Fst).then(ZeroMap).pair(Snd)
    }
}

impl<A: Space> Map<A> for Duplicate {
    type Output = (A, A);
    type Memo = ();
    fn forward_memo(&self, x: &A) -> Result<((A, A), ())> {
        Ok(((x.clone(), x.clone()), ()))
    }
    fn backward_memo(&self, _: &(), dy: &(A, A)) -> Result<A> {
        dy.0.try_add(&dy.1)
    }
}

impl<A: Space> Reverse<A> for Duplicate {
    type Rev = Then<Snd, AddPair>;
    fn rev(&self) -> Self::Rev {
        Snd.then(AddPair)
    }
}

impl<A: Space> Map<(A, A)> for AddPair {
    type Output = A;
    type Memo = ();
    fn forward_memo(&self, x: &(A, A)) -> Result<(A, ())> {
        Ok((x.0.try_add(&x.1)?, ()))
    }
    fn backward_memo(&self, _: &(), dy: &A) -> Result<(A, A)> {
        Ok((dy.clone(), dy.clone()))
    }
}

impl<A: Space> Reverse<(A, A)> for AddPair {
    type Rev = Then<Snd, Duplicate>;
    fn rev(&self) -> Self::Rev {
        Snd.then(Duplicate)
    }
}

impl<A: Space> Map<A> for Discard {
    type Output = ();
    type Memo = A::Shape;
    fn forward(&self, _: &A) -> Result<()> {
        Ok(())
    }
    fn forward_memo(&self, x: &A) -> Result<((), A::Shape)> {
        Ok(((), x.shape()))
    }
    fn backward_memo(&self, shape: &A::Shape, _: &()) -> Result<A> {
        Ok(A::zero_of(shape))
    }
}

impl<A: Space> Reverse<A> for Discard {
    type Rev = Then<Fst, ZeroMap>;
    fn rev(&self) -> Self::Rev {
        Fst.then(ZeroMap)
    }
}

impl<A: Space> Map<A> for ZeroMap {
    type Output = A;
    type Memo = A::Shape;
    fn forward(&self, x: &A) -> Result<A> {
        Ok(x.zero_like())
    }
    fn forward_memo(&self, x: &A) -> Result<(A, A::Shape)> {
        Ok((x.zero_like(), x.shape()))
    }
    fn backward_memo(&self, shape: &A::Shape, _: &A) -> Result<A> {
        Ok(A::zero_of(shape))
    }
}

impl<A: Space> Reverse<A> for ZeroMap {
    type Rev = Then<Fst, ZeroMap>;
    fn rev(&self) -> Self::Rev {
        Fst.then(ZeroMap)
    }
}

impl<A: Space, B: Space> Map<A> for Constant<B> {
    type Output = B;
    type Memo = A::Shape;
    fn forward(&self, _: &A) -> Result<B> {
        Ok(self.0.clone())
    }
    fn forward_memo(&self, x: &A) -> Result<(B, A::Shape)> {
        Ok((self.0.clone(), x.shape()))
    }
    fn backward_memo(&self, shape: &A::Shape, _: &B) -> Result<A> {
        Ok(A::zero_of(shape))
    }
}

impl<A: Space, B: Space> Reverse<A> for Constant<B> {
    type Rev = Then<Fst, ZeroMap>;
    fn rev(&self) -> Self::Rev {
        Fst.then(ZeroMap)
    }
}

impl<S: Copy + 'static, A: Scalable<S>> Map<A> for MultiplyBy<S> {
    type Output = A;
    type Memo = ();
    fn forward_memo(&self, x: &A) -> Result<(A, ())> {
        Ok((x.scale(self.0), ()))
    }
    fn backward_memo(&self, _: &(), dy: &A) -> Result<A> {
        Ok(dy.scale(self.0))
    }
}

impl<S: Copy + 'static, A: Scalable<S>> Reverse<A> for MultiplyBy<S> {
    type Rev = Then<Snd, MultiplyBy<S>>;
    fn rev(&self) -> Self::Rev {
        Snd.then(*self)
    }
}

impl<A: Space> Linear<A> for Id {}
impl<A: Space, B: Space> Linear<(A, B)> for Fst {}
impl<A: Space, B: Space> Linear<(A, B)> for Snd {}
impl<A: Space> Linear<A> for Duplicate {}
impl<A: Space> Linear<(A, A)> for AddPair {}
impl<A: Space> Linear<A> for Discard {}
impl<A: Space> Linear<A> for ZeroMap {}
impl<S: Copy + 'static, A: Scalable<S>> Linear<A> for MultiplyBy<S> {}
