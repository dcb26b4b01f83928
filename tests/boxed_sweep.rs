//! Boxed compositions of maps on one real number (`ScalarStages`): a
//! `Boxed<f64, f64>` or `Boxed<f32, f32>` whose map lists its stages
//! sweeps them, and gives through every pass what the same map gives
//! through its own passes, bit for bit, whatever the nesting, the values
//! (NaN, overflowing slopes), the settings (errors) and the workspaces.

use proptest::prelude::*;
use revdiff::*;

/// A scalar map that lists no stages: boxed maps that hold it run their
/// map's own passes, the reference the sweep is held to.
#[derive(Clone, Debug)]
struct Opaque<F>(F);

impl<F> Compose for Opaque<F> {}

impl<T: Real, F: Map<T, Output = T>> Map<T> for Opaque<F> {
    type Output = T;
    type Memo = F::Memo;
    fn forward_memo(&self, x: &T) -> Result<(T, F::Memo)> {
        self.0.forward_memo(x)
    }
    fn backward_memo(&self, memo: &F::Memo, dy: &T) -> Result<T> {
        self.0.backward_memo(memo, dy)
    }
}

/// How many stages [`nested`] can make: every elementwise map of the
/// catalogue, the identity and scaling.
const STAGES: usize = 25;

/// The boxed map of `stages` (each below [`STAGES`]), nested one level
/// per stage after the first; with `opaque`, the innermost stage is
/// wrapped so that nothing lists its stages and every pass is the maps'
/// own.
fn nested<T>(first: usize, stages: &[usize], opaque: bool) -> Boxed<T, T>
where
    T: Real + HeldBytes,
    Powi<T>: Map<T, Output = T, Memo = T>,
    Powf<T>: Map<T, Output = T, Memo = T>,
    Shift<T>: Map<T, Output = T, Memo = T>,
    Clamp<T>: Map<T, Output = T, Memo = T>,
    InsideBand<T>: Map<T, Output = T, Memo = T>,
    MultiplyBy<T>: Map<T, Output = T, Memo = ()>,
{
    let real = |v: f64| T::from(v).unwrap();
    // `f` followed by stage `k`, boxed: one level of nesting.
    let after = |f: Boxed<T, T>, k: usize| {
        match k {
            0 => Boxed::new(f.then(Sin)),
            1 => Boxed::new(f.then(Cos)),
            2 => Boxed::new(f.then(Tanh)),
            3 => Boxed::new(f.then(SechSquared)),
            4 => Boxed::new(f.then(Sigmoid)),
            5 => Boxed::new(f.then(Softplus)),
            6 => Boxed::new(f.then(Exp)),
            7 => Boxed::new(f.then(ExpMinusOne)),
            8 => Boxed::new(f.then(Ln)),
            9 => Boxed::new(f.then(LnOnePlus)),
            10 => Boxed::new(f.then(Sqrt)),
            11 => Boxed::new(f.then(Arctan)),
            12 => Boxed::new(f.then(Neg)),
            13 => Boxed::new(f.then(Abs)),
            14 => Boxed::new(f.then(Signum)),
            15 => Boxed::new(f.then(Relu)),
            16 => Boxed::new(f.then(Heaviside)),
            17 => Boxed::new(f.then(IntegerPower(3))),
            18 => Boxed::new(f.then(Powi::new(2))),
            19 => Boxed::new(f.then(Powf::new(real(0.5)))),
            20 => Boxed::new(f.then(Shift::new(real(0.25)).unwrap())),
            21 => Boxed::new(f.then(Clamp::new(real(0.9)).unwrap())),
            22 => Boxed::new(f.then(InsideBand::new(real(0.9)).unwrap())),
            23 => Boxed::new(f.then(id())),
            _ => Boxed::new(f.then(multiply_by(real(-1.7)))),
        }
        .unwrap()
    };
    let mut f: Boxed<T, T> = after(Boxed::new(Neg.then(Neg)).unwrap(), first);
    if opaque {
        f = Boxed::new(Opaque(f)).unwrap();
    }
    for &k in stages {
        f = after(f, k);
    }
    f
}

/// Every pass of `swept` and `reference` at `x` with output change `dy`:
/// values, the one-shot backward pass, and two rounds of the reusing
/// passes in one workspace (the second reusing the first's buffers).
fn assert_same_passes<T: Real>(swept: &Boxed<T, T>, reference: &Boxed<T, T>, x: T, dy: T) {
    let same = |a: T, b: T, what: &str| {
        assert!(
            a == b || (a.is_nan() && b.is_nan()),
            "{what}: swept {a:?}, the maps' own passes {b:?}"
        );
    };
    let expected_y = reference.forward(&x).unwrap();
    let expected_dx = reference.backward(&x, &dy).unwrap();
    same(swept.forward(&x).unwrap(), expected_y, "forward");
    same(swept.backward(&x, &dy).unwrap(), expected_dx, "backward");
    let (mut work, mut dx) = (Workspace::new(), T::zero());
    for round in 0..2 {
        let y = *swept.forward_reusing(&x, &mut work).unwrap();
        same(y, expected_y, &format!("reusing forward, round {round}"));
        same(
            *swept.reused_output(&work).unwrap(),
            expected_y,
            "reused output",
        );
        swept.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
        same(dx, expected_dx, &format!("reusing backward, round {round}"));
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    #[test]
    fn sweeping_f64_gives_the_maps_own_numbers(
        first in 0..STAGES,
        stages in prop::collection::vec(0..STAGES, 0..40),
        x in -2.0..2.0_f64,
        dy in -3.0..3.0_f64,
    ) {
        let swept = nested::<f64>(first, &stages, false);
        let mut listed = ScalarStages::new();
        prop_assert!(swept.scalar_stages(&mut listed) && listed.len_on::<f64>().is_some());
        assert_same_passes(&swept, &nested(first, &stages, true), x, dy);
    }

    #[test]
    fn sweeping_f32_gives_the_maps_own_numbers(
        first in 0..STAGES,
        stages in prop::collection::vec(0..STAGES, 0..40),
        x in -2.0..2.0_f32,
        dy in -3.0..3.0_f32,
    ) {
        let swept = nested::<f32>(first, &stages, false);
        let mut listed = ScalarStages::new();
        prop_assert!(swept.scalar_stages(&mut listed) && listed.len_on::<f32>().is_some());
        assert_same_passes(&swept, &nested(first, &stages, true), x, dy);
    }
}

/// The chain rule by hand for `sin` then `tanh`, then a square: the
/// product of the slopes, last stage first.
#[test]
fn the_sweep_is_the_chain_rule() {
    let f: Boxed<f64, f64> =
        Boxed::new(Boxed::new(Sin.then(Tanh)).unwrap().then(Powi::new(2))).unwrap();
    let (x, dy) = (0.7_f64, -1.5);
    let (s, c) = x.sin_cos();
    let t = s.tanh();
    let expected = ((2.0 * t) * dy) * (1.0 - t * t) * c;
    let got = f.backward(&x, &dy).unwrap();
    assert!((got - expected).abs() <= 1e-15, "{got} against {expected}");
    assert_eq!(f.forward(&x).unwrap(), t * t);
}

#[test]
fn stages_are_listed_by_type() {
    let listed = |f: &dyn Fn(&mut ScalarStages) -> bool| {
        let mut stages = ScalarStages::new();
        let any = f(&mut stages);
        (any, stages.len_on::<f64>(), stages.len_on::<f32>())
    };
    assert_eq!(
        listed(&|s| Sin.then(Exp).scalar_stages(s)),
        (true, Some(2), Some(2))
    );
    // The identity is no stage; scaling by an `f32` is a stage on `f32`.
    assert_eq!(
        listed(&|s| id().then(Sin).then(id()).scalar_stages(s)),
        (true, Some(1), Some(1))
    );
    assert_eq!(
        listed(&|s| Sin.then(multiply_by(2.0_f32)).scalar_stages(s)),
        (true, None, Some(2))
    );
    // A setting of one element type: the other type's list is dropped.
    assert_eq!(
        listed(&|s| Sin.then(Powi::<f64>::new(3)).then(Tanh).scalar_stages(s)),
        (true, Some(3), None)
    );
    assert_eq!(
        listed(&|s| Powi::<f32>::new(3)
            .then(Powi::<f64>::new(3))
            .scalar_stages(s)),
        (false, None, None)
    );
    // A map that lists nothing, anywhere in the composite.
    assert!(!listed(&|s| Sin.then(Opaque(Sin)).then(Tanh).scalar_stages(s)).0);
    assert!(!listed(&|s| Sin.pair(Tanh).scalar_stages(s)).0);
    // A boxed map lists the map it holds, before and after its first pass.
    let boxed: Boxed<f64, f64> = Boxed::new(Sin.then(Tanh)).unwrap();
    assert_eq!(
        listed(&|s| boxed.clone().then(Sin).scalar_stages(s)),
        (true, Some(3), Some(3))
    );
    boxed.backward(&0.5, &1.0).unwrap();
    assert_eq!(
        listed(&|s| boxed.clone().then(Sin).scalar_stages(s)),
        (true, Some(3), Some(3))
    );
}

/// A stage's error comes back as itself from every pass, as from the
/// maps' own passes (the sweep reads it as a NaN and gives way).
#[test]
fn a_stage_error_is_reported() {
    let bad = Powf::new(f64::NAN);
    let f: Boxed<f64, f64> = Boxed::new(Boxed::new(Sin.then(bad)).unwrap().then(Tanh)).unwrap();
    let is_setting = |e: Error| matches!(e, Error::InvalidSetting { .. });
    assert!(is_setting(f.backward(&0.5, &1.0).unwrap_err()));
    let mut work = Workspace::new();
    assert!(is_setting(f.forward_reusing(&0.5, &mut work).unwrap_err()));
}

/// A NaN a stage gives (the logarithm of a negative number) is a value,
/// not an error, and a slope that overflows (a power near 0) is left to
/// the map's own backward pass: both as the maps' own passes give them.
#[test]
fn nan_values_and_overflowing_slopes_are_the_maps_own() {
    let ln = |opaque: bool| -> Boxed<f64, f64> {
        let inner: Boxed<f64, f64> = if opaque {
            Boxed::new(Opaque(Neg.then(Ln))).unwrap()
        } else {
            Boxed::new(Neg.then(Ln)).unwrap()
        };
        Boxed::new(inner.then(Sin)).unwrap()
    };
    assert!(ln(false).forward(&0.5).unwrap().is_nan());
    assert_same_passes(&ln(false), &ln(true), 0.5, 1.0);
    assert_same_passes(&ln(false), &ln(true), -0.5, 1.0);

    let power = |opaque: bool| -> Boxed<f64, f64> {
        let inner: Boxed<f64, f64> = if opaque {
            Boxed::new(Opaque(Sin.then(Powi::new(-3)))).unwrap()
        } else {
            Boxed::new(Sin.then(Powi::new(-3))).unwrap()
        };
        Boxed::new(inner.then(Neg)).unwrap()
    };
    // sin(x)^-4 overflows at x = 1e-80; the change times it need not.
    let (x, dy) = (1e-80_f64, 1e-250);
    let expected = power(true).backward(&x, &dy).unwrap();
    assert!(expected.is_finite() && expected != 0.0, "{expected}");
    assert_same_passes(&power(false), &power(true), x, dy);
}

/// A workspace filled by another boxed map is refused by the backward
/// pass, and refilled by this map's forward pass.
#[test]
fn another_maps_workspace_is_refused() {
    let f: Boxed<f64, f64> = Boxed::new(Boxed::new(Sin.then(Sin)).unwrap().then(Tanh)).unwrap();
    let g: Boxed<f64, f64> = Boxed::new(Boxed::new(Tanh.then(Sin)).unwrap().then(Sin)).unwrap();
    let (mut work, mut dx) = (Workspace::new(), 0.0);
    g.forward_reusing(&0.5, &mut work).unwrap();
    let refused = f
        .backward_reusing(&0.5, &mut work, &1.0, &mut dx)
        .unwrap_err();
    assert!(
        matches!(refused, Error::WorkspaceNotFilled { .. }),
        "{refused:?}"
    );
    assert!(matches!(
        f.reused_output(&work),
        Err(Error::WorkspaceNotFilled { .. })
    ));
    f.forward_reusing(&0.5, &mut work).unwrap();
    f.backward_reusing(&0.5, &mut work, &1.0, &mut dx).unwrap();
    assert_eq!(dx, f.backward(&0.5, &1.0).unwrap());
    // A clone is the same map: it reads the workspace.
    f.clone()
        .backward_reusing(&0.5, &mut work, &2.0, &mut dx)
        .unwrap();
    assert_eq!(dx, f.backward(&0.5, &2.0).unwrap());
}
