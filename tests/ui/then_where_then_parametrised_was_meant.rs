// Two affine stages joined with `then`: the second stage needs
// `(parameters, input)`, so the model cannot be trained.
use revdiff::ndarray::{array, Array2};
use revdiff::{Adam, Affine, Compose, Examples, MeanSquaredError, Tanh, Training};

fn main() {
    let x = Array2::from_shape_fn((4, 1), |(i, _)| i as f64);
    let data = Examples::new(x.clone(), x).unwrap();
    let model = Affine.then(Tanh).then(Affine);
    let start = ((array![[1.0]], array![0.0]), (array![[1.0]], array![0.0]));
    let mut adam = Adam::new(0.1).unwrap();
    let _ = Training::new(1, 2)
        .unwrap()
        .run(&model, &MeanSquaredError, &mut adam, start, &data, |_| {});
}
