// Data in f64, an optimiser in f32.
use revdiff::ndarray::{array, Array2};
use revdiff::{Adam, Affine, Examples, MeanSquaredError, Training};

fn main() {
    let x = Array2::from_shape_fn((4, 1), |(i, _)| i as f64);
    let data = Examples::new(x.clone(), x).unwrap();
    let mut adam = Adam::<f32>::new(0.1).unwrap();
    let start = (array![[1.0_f64]], array![0.0_f64]);
    let _ = Training::new(1, 2)
        .unwrap()
        .run(&Affine, &MeanSquaredError, &mut adam, start, &data, |_| {});
}
