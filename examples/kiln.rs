//! Derivatives demonstration: a hand-written primitive composed with catalogue
//! pieces into a small model, and every derivative the library reads off it.
//!
//! Scenario (invented): a timber kiln has three probes (air temperature,
//! humidity, fan speed, each scaled to about -1..1). A linear mix of the
//! probes feeds a smooth ramp written by the user, because a stack barely dries below a threshold;
//! the model's output is the summed drying rate of two board stacks.
//!
//! Run with `cargo run --release --example kiln`.

use ndarray::{Array1, Array2, array};
use revdiff::{
    Affine, Compose, ElementReduction, Fst, Id, Map, MulPair, Neg, Pair, Plus, Result, Reverse,
    Sigmoid, Snd, Then, constant, forward_derivative, fst, hessian_vector, id, jacobian, snd,
};

/// The user's own primitive, elementwise: `x -> x sigmoid(x)`, a smooth
/// ramp that is near zero for negative mixes and near `x` for positive
/// ones (a stack barely dries below the threshold, then dries in
/// proportion). Its backward pass is written by hand: the slope is
/// `s (1 + x (1 - s))` with `s = sigmoid(x)`.
#[derive(Clone, Debug)]
struct GatedRamp;

fn sigmoid(v: f64) -> f64 {
    1.0 / (1.0 + (-v).exp())
}

impl Compose for GatedRamp {}

impl Map<Array1<f64>> for GatedRamp {
    type Output = Array1<f64>;
    type Memo = Array1<f64>; // the input, for the slope
    fn forward_memo(&self, x: &Array1<f64>) -> Result<(Array1<f64>, Array1<f64>)> {
        Ok((x.mapv(|v| v * sigmoid(v)), x.clone()))
    }
    fn backward_memo(&self, x: &Array1<f64>, dy: &Array1<f64>) -> Result<Array1<f64>> {
        Ok(x.mapv(|v| {
            let s = sigmoid(v);
            s * (1.0 + v * (1.0 - s))
        }) * dy)
    }
}

/// The slope `sigmoid(x) + x sigmoid(x) sigmoid(-x)`, from catalogue pieces.
type Slope =
    Plus<Sigmoid, Then<Pair<Id, Then<Pair<Sigmoid, Then<Neg, Sigmoid>>, MulPair>>, MulPair>>;

/// The reverse derivative as a map, `(x, dy) -> slope(x) dy`, built from the
/// catalogue so that it can be differentiated again.
impl Reverse<Array1<f64>> for GatedRamp {
    type Rev = Then<Pair<Then<Fst, Slope>, Snd>, MulPair>;
    fn rev(&self) -> Self::Rev {
        let s_times_s_neg = Sigmoid.pair(Neg.then(Sigmoid)).then(MulPair);
        let slope = Sigmoid.plus(id().pair(s_times_s_neg).then(MulPair));
        fst().then(slope).pair(snd()).then(MulPair)
    }
}

fn main() -> Result<()> {
    let weights: Array2<f64> = array![[0.8, -0.5, 0.3], [0.2, 0.9, -0.4]];
    let bias: Array1<f64> = array![0.1, -0.2];
    let probes: Array1<f64> = array![0.6, -0.3, 0.9];

    // probes -> affine mix -> gated ramp -> summed drying rate
    let mix = constant((weights, bias)).pair(id()).then(Affine);
    let rates = mix.then(GatedRamp);
    let model = rates.clone().then(ElementReduction::sum());

    let value = model.forward(&probes)?;
    let gradient = model.backward(&probes, &1.0)?;
    let along_temperature = forward_derivative(&model, &probes, &array![1.0, 0.0, 0.0])?;
    let jac = jacobian(&rates, &probes)?;
    let hv = hessian_vector(&model, &probes, &array![0.0, 1.0, 0.0])?;

    println!("kiln model: probes {probes}");
    println!("  drying rate           {value:.6}");
    println!("  gradient              {gradient:.6}");
    println!("  d rate / d temperature (forward derivative) {along_temperature:.6}");
    println!("  Jacobian of the two stack rates (2 x 3):\n{jac:.6}");
    println!("  Hessian times humidity direction {hv:.6}");

    // Is the hand-written backward right? Compare it with its reverse
    // derivative as a map and with central differences.
    let dy: Array1<f64> = array![1.0, -0.5];
    let x: Array1<f64> = array![0.4, -1.7];
    let by_hand = GatedRamp.backward(&x, &dy)?;
    let as_map = GatedRamp.rev().forward(&(x.clone(), dy.clone()))?;
    let h = 1e-6;
    let central: Array1<f64> = x.mapv(|v| {
        let s = |u: f64| u * sigmoid(u);
        (s(v + h) - s(v - h)) / (2.0 * h)
    }) * &dy;
    println!("check of the hand-written backward at x = {x}, dy = {dy}:");
    println!("  by hand              {by_hand:.9}");
    println!("  reverse map          {as_map:.9}");
    println!("  central differences  {central:.9}");
    let worst = (&by_hand - &central)
        .mapv(f64::abs)
        .fold(0.0_f64, |m, v| m.max(*v));
    println!("  largest difference from central differences: {worst:.2e}");
    assert!(worst < 1e-8, "the hand-written backward disagrees");

    // The same question, asked of every law at 256 drawn inputs, at orders
    // 1 and 2 (the reverse map's own derivative included).
    let report = revdiff::laws::Checker::new().reverse(
        &GatedRamp,
        revdiff::laws::strategies::vectors(2, -4.0, 4.0).unwrap(),
    );
    println!(
        "law check of the hand-written primitive: {} of {} checks broken",
        report.violations().len(),
        report.checked().len()
    );
    report.assert_clean();
    Ok(())
}
