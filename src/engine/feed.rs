//! Feeding an evaluation set to a model batch by batch, as tract tensors of
//! each input's type (`fit::bind` decided which array feeds which input).
//!
//! Narrowing conversions (float64 into float32, int64 into int32) are
//! checked value by value, so a value that would change is an error naming
//! its array and sample.

use tract_onnx::prelude::*;

use super::dataset::{EvalSet, RowStream};
use super::error::{EngineError, EngineResult};
use super::fit::{Binding, InputBinding};
use super::model::numpy_name;
use super::npy::{self, Header, Scalar};

fn mismatch(msg: String) -> EngineError {
    EngineError::Mismatch(msg)
}

/// Streams batches of every bound array in step.
pub struct Feed<'a> {
    binding: &'a Binding,
    streams: Vec<RowStream>,
    buf: Vec<u8>,
    next_sample: usize,
}

impl<'a> Feed<'a> {
    pub fn open(set: &EvalSet, binding: &'a Binding) -> EngineResult<Feed<'a>> {
        let streams = binding
            .inputs
            .iter()
            .map(|b| set.stream(b.member))
            .collect::<EngineResult<_>>()?;
        Ok(Feed {
            binding,
            streams,
            buf: Vec::new(),
            next_sample: 0,
        })
    }

    /// The next `rows` samples as one tensor per model input.
    pub fn next_batch(&mut self, rows: usize) -> EngineResult<TVec<TValue>> {
        Ok(self
            .next_tensors(rows)?
            .into_iter()
            .map(Tensor::into_tvalue)
            .collect())
    }

    /// The same as plain tensors, which (unlike values) may cross threads.
    pub fn next_tensors(&mut self, rows: usize) -> EngineResult<Vec<Tensor>> {
        let mut out = Vec::with_capacity(self.streams.len());
        for (b, stream) in self.binding.inputs.iter().zip(&mut self.streams) {
            stream.read(rows, &mut self.buf)?;
            let mut shape = vec![rows];
            shape.extend_from_slice(&b.row_shape);
            out.push(convert(
                &self.buf,
                &stream.header,
                b,
                &shape,
                self.next_sample,
            )?);
        }
        self.next_sample += rows;
        Ok(out)
    }
}

fn convert(
    raw: &[u8],
    header: &Header,
    b: &InputBinding,
    shape: &[usize],
    first_sample: usize,
) -> EngineResult<Tensor> {
    let count: usize = shape.iter().product();
    let per_row: usize = shape[1..].iter().product::<usize>().max(1);
    let fail = |i: usize, what: &str| {
        mismatch(format!(
            "array '{}' at sample {}: {what} cannot be fed to a {} input without loss",
            b.array,
            first_sample + i / per_row,
            numpy_name(b.target).unwrap_or("?")
        ))
    };
    let as_float = |i: usize, limit: f64, max_exact: i128| -> EngineResult<f64> {
        match npy::element(raw, header, i) {
            Scalar::Float(v) if v.is_finite() && v.abs() > limit => Err(fail(i, &format!("{v}"))),
            Scalar::Float(v) => Ok(v),
            Scalar::Int(v) if v.abs() > max_exact => Err(fail(i, &format!("{v}"))),
            Scalar::Int(v) => Ok(v as f64),
        }
    };
    let tensor_err = |e: TractError| mismatch(format!("building an input tensor: {e}"));
    let same_layout = !header.big_endian && numpy_name(b.target).ok() == Some(header.dtype.name());
    if same_layout && b.target != DatumType::Bool {
        // Same dtype, little-endian: the bytes are already the tensor's bytes.
        // SAFETY: every bit pattern is a valid value of the numeric types here.
        return unsafe { Tensor::from_raw_dt(b.target, shape, raw) }.map_err(tensor_err);
    }
    match b.target {
        DatumType::F32 | DatumType::F16 => {
            let (limit, exact) = if b.target == DatumType::F16 {
                (65504.0, 2048)
            } else {
                (f32::MAX as f64, 1 << 24)
            };
            let v = (0..count)
                .map(|i| as_float(i, limit, exact).map(|x| x as f32))
                .collect::<EngineResult<Vec<f32>>>()?;
            let t = Tensor::from_shape(shape, &v).map_err(tensor_err)?;
            if b.target == DatumType::F16 {
                return t
                    .cast_to_dt(DatumType::F16)
                    .map(|c| c.into_owned())
                    .map_err(tensor_err);
            }
            Ok(t)
        }
        DatumType::F64 => {
            let v = (0..count)
                .map(|i| as_float(i, f64::MAX, 1 << 53))
                .collect::<EngineResult<Vec<f64>>>()?;
            Tensor::from_shape(shape, &v).map_err(tensor_err)
        }
        DatumType::Bool => {
            let v: Vec<bool> = (0..count)
                .map(|i| npy::element(raw, header, i) != Scalar::Int(0))
                .collect();
            Tensor::from_shape(shape, &v).map_err(tensor_err)
        }
        target => {
            let (lo, hi) = int_range(target);
            let v = (0..count)
                .map(|i| match npy::element(raw, header, i) {
                    Scalar::Int(v) if (lo..=hi).contains(&v) => Ok(v as i64),
                    Scalar::Int(v) => Err(fail(i, &format!("{v}"))),
                    Scalar::Float(v) => Err(fail(i, &format!("{v}"))),
                })
                .collect::<EngineResult<Vec<i64>>>()?;
            let t = Tensor::from_shape(shape, &v).map_err(tensor_err)?;
            if target == DatumType::I64 {
                return Ok(t);
            }
            t.cast_to_dt(target)
                .map(|c| c.into_owned())
                .map_err(tensor_err)
        }
    }
}

fn int_range(dt: DatumType) -> (i128, i128) {
    match dt {
        DatumType::I8 => (i8::MIN as i128, i8::MAX as i128),
        DatumType::I16 => (i16::MIN as i128, i16::MAX as i128),
        DatumType::I32 => (i32::MIN as i128, i32::MAX as i128),
        DatumType::U8 => (0, u8::MAX as i128),
        DatumType::U16 => (0, u16::MAX as i128),
        DatumType::U32 => (0, u32::MAX as i128),
        // u64 values above i64::MAX are refused: they travel through i64.
        DatumType::U64 => (0, i64::MAX as i128),
        _ => (i64::MIN as i128, i64::MAX as i128),
    }
}
