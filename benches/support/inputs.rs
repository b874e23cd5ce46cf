//! Inputs for benchmarks that time arbitrary models: what an input holds
//! does not change how long a float model takes, only that it is finite.

use tract_onnx::prelude::*;

/// The seed every benchmark starts from, so two runs feed the same values.
pub(crate) const SEED: u64 = 0x2545F4914F6CDD1D;

/// A tensor of `shape`: pseudo-random floats in [-0.5, 0.5) for f32 (an
/// xorshift stream advanced through `seed`), ones for any other type, so
/// that token ids and masks stay valid.
pub(crate) fn filled(shape: Vec<usize>, dt: DatumType, seed: &mut u64) -> Tensor {
    let len: usize = shape.iter().product();
    if dt == f32::datum_type() {
        let values: Vec<f32> = (0..len)
            .map(|_| {
                *seed ^= *seed << 13;
                *seed ^= *seed >> 7;
                *seed ^= *seed << 17;
                (*seed >> 40) as f32 / (1u64 << 24) as f32 - 0.5
            })
            .collect();
        tract_ndarray::ArrayD::from_shape_vec(shape, values)
            .expect("the values fill the shape")
            .into()
    } else {
        Tensor::from(tract_ndarray::ArrayD::from_elem(shape, 1i64))
            .cast_to_dt(dt)
            .expect("one casts to every numeric type")
            .into_owned()
    }
}
