//! Whether an evaluation set fits a model, and which output is scored:
//! decided from the facts an upload recorded (input names, dtypes and
//! shapes, output shapes, the set's arrays and largest label), so that a
//! new evaluation is checked without loading a model. The engine applies
//! the same rules to the loaded model when it runs.

use std::collections::HashMap;

use tract_onnx::prelude::DatumType;

use super::dataset::{ArrayInfo, DatasetInfo, is_model_input};
use super::error::{EngineError, EngineResult};
use super::logits::class_count;
use super::model::{Dim, ModelInfo, datum_type_of, numpy_name};
use super::npy::Dtype;
use super::settings::SettingsError;

/// Which array feeds one model input, and how.
#[derive(Debug, Clone)]
pub struct InputBinding {
    /// Position of the array among the set's arrays.
    pub member: usize,
    pub array: String,
    pub target: DatumType,
    /// The shape of one sample (every axis but the batch axis).
    pub row_shape: Vec<usize>,
}

/// How an evaluation set feeds one model: an array per input, and the sizes
/// its symbolic non-batch axes take from the set.
#[derive(Debug, Clone)]
pub struct Binding {
    pub inputs: Vec<InputBinding>,
    pub dims: HashMap<String, usize>,
}

fn mismatch(msg: String) -> EngineError {
    EngineError::Mismatch(msg)
}

/// Matches the set's arrays to a model's inputs by name (a one-input model
/// takes the set's single input array whatever its name) and checks that
/// each fits: dtype, number of axes, and every non-batch axis.
pub fn bind(info: &ModelInfo, arrays: &[ArrayInfo], label: &str) -> EngineResult<Binding> {
    let features: Vec<(usize, Option<&str>)> = arrays
        .iter()
        .enumerate()
        .filter(|(_, a)| is_model_input(a.name.as_deref()))
        .map(|(i, a)| (i, a.name.as_deref()))
        .collect();
    let inputs = &info.inputs;
    if let Some(Dim::Fixed(b)) = inputs.first().and_then(|i| i.shape.first())
        && *b != 1
    {
        return Err(mismatch(format!(
            "model '{label}' has its batch axis fixed to {b}; the timed rounds run one \
             sample at a time, so export it with a symbolic or unit batch axis"
        )));
    }
    let mut dims = HashMap::new();
    let mut bound = Vec::with_capacity(inputs.len());
    for spec in inputs {
        let member = if inputs.len() == 1 && features.len() == 1 {
            features[0].0
        } else {
            features
                .iter()
                .find(|(_, name)| *name == Some(spec.name.as_str()))
                .map(|(i, _)| *i)
                .ok_or_else(|| {
                    let names: Vec<&str> = features.iter().filter_map(|(_, n)| *n).collect();
                    mismatch(format!(
                        "model '{label}' needs an array named '{}' and the set has none \
                         (its arrays: {})",
                        spec.name,
                        if names.is_empty() {
                            "one unnamed array".into()
                        } else {
                            names.join(", ")
                        }
                    ))
                })?
        };
        let a = &arrays[member];
        let array = a.name.clone().unwrap_or_else(|| "the array".into());
        let target = datum_type_of(&spec.dtype).ok_or_else(|| {
            EngineError::InvalidModel(format!(
                "input '{}' of model '{label}' has dtype {}, which Proctor cannot feed",
                spec.name, spec.dtype
            ))
        })?;
        let src = Dtype::from_name(&a.dtype).ok_or_else(|| {
            EngineError::InvalidDataset(format!("array '{array}' has dtype {}", a.dtype))
        })?;
        check_dtype(src, target, &array, &spec.name)?;
        if a.shape.len() != spec.shape.len() {
            return Err(mismatch(format!(
                "array '{array}' has shape {:?} but input '{}' of model '{label}' has {} axes",
                a.shape,
                spec.name,
                spec.shape.len()
            )));
        }
        for (axis, (want, &have)) in spec.shape.iter().zip(&a.shape).enumerate().skip(1) {
            let fits = match want {
                Dim::Fixed(n) => *n == have,
                Dim::Symbol(s) => *dims.entry(s.clone()).or_insert(have) == have,
            };
            if !fits {
                return Err(mismatch(format!(
                    "array '{array}' has size {have} on axis {axis}, which does not fit input '{}' \
                     of model '{label}' (shape {})",
                    spec.name,
                    serde_json::to_string(&spec.shape).unwrap_or_default()
                )));
            }
        }
        bound.push(InputBinding {
            member,
            array,
            target,
            row_shape: a.shape[1..].to_vec(),
        });
    }
    Ok(Binding {
        inputs: bound,
        dims,
    })
}

/// Refuses conversions that cannot carry the values: a float array into an
/// integer input, anything but bool into a bool input. Narrowing ones are
/// checked value by value while feeding.
fn check_dtype(src: Dtype, target: DatumType, array: &str, input: &str) -> EngineResult<()> {
    let ok = match target {
        DatumType::F16 | DatumType::F32 | DatumType::F64 => true,
        DatumType::Bool => src == Dtype::Bool,
        _ => !src.is_float(),
    };
    if ok {
        Ok(())
    } else {
        Err(mismatch(format!(
            "array '{array}' is {} and cannot feed input '{input}' ({}) without loss",
            src.name(),
            numpy_name(target).unwrap_or("?")
        )))
    }
}

/// What is known of one output's shape: its class count when it squeezes
/// to [N, C], that it does not, or (from a record whose class axis depends
/// on a set dimension) nothing yet.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Classes {
    Squeezes(usize),
    DoesNot,
    Unknown,
}

/// One output, as the output rule sees it.
#[derive(Debug, Clone)]
pub struct OutputFacts<'a> {
    pub name: &'a str,
    pub float: bool,
    pub classes: Classes,
    /// The shape at batch 1, for messages.
    pub shape: String,
}

/// The scored output and its class count.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Scored {
    pub index: usize,
    pub classes: usize,
}

/// The output rule of metrics.md: the named output, or else the first float
/// output that squeezes to [N, C]. `Ok(None)` when a shape the rule needs
/// is unknown.
pub fn choose_output(
    outputs: &[OutputFacts<'_>],
    requested: Option<&str>,
    label: &str,
) -> EngineResult<Option<Scored>> {
    let listed = || {
        outputs
            .iter()
            .map(|o| format!("'{}' {}", o.name, o.shape))
            .collect::<Vec<_>>()
            .join(", ")
    };
    if let Some(name) = requested {
        let (index, o) = outputs
            .iter()
            .enumerate()
            .find(|(_, o)| o.name == name)
            .ok_or_else(|| {
                EngineError::Settings(SettingsError {
                    field: "output".into(),
                    message: format!(
                        "model '{label}' has no output named '{name}' (its outputs: {})",
                        listed()
                    ),
                })
            })?;
        if !o.float {
            return Err(mismatch(format!(
                "output '{name}' of model '{label}' is not a float tensor, so it holds no scores"
            )));
        }
        return match o.classes {
            Classes::Squeezes(classes) => Ok(Some(Scored { index, classes })),
            Classes::Unknown => Ok(None),
            Classes::DoesNot => Err(mismatch(format!(
                "output '{name}' of model '{label}' has shape {}: it must squeeze to \
                 [batch, classes] with at least 2 classes",
                o.shape
            ))),
        };
    }
    for (index, o) in outputs.iter().enumerate() {
        if !o.float {
            continue;
        }
        match o.classes {
            Classes::Squeezes(classes) => return Ok(Some(Scored { index, classes })),
            Classes::Unknown => return Ok(None),
            Classes::DoesNot => {}
        }
    }
    Err(mismatch(format!(
        "model '{label}' has no float output that squeezes to [batch, classes] with at least \
         2 classes (its outputs: {})",
        listed()
    )))
}

/// Output facts from a model's record: shapes with a symbolic axis beyond
/// the batch axis are unknown until the set binds them.
pub fn recorded_outputs(info: &ModelInfo) -> Vec<OutputFacts<'_>> {
    info.outputs
        .iter()
        .map(|o| {
            let float = matches!(o.dtype.as_str(), "float16" | "float32" | "float64");
            let fixed: Option<Vec<usize>> = o
                .shape
                .iter()
                .enumerate()
                .map(|(axis, d)| match d {
                    Dim::Fixed(n) => Some(*n),
                    Dim::Symbol(_) if axis == 0 => Some(1),
                    Dim::Symbol(_) => None,
                })
                .collect();
            let classes = match &fixed {
                Some(shape) => match class_count(shape) {
                    Ok(c) => Classes::Squeezes(c),
                    Err(_) => Classes::DoesNot,
                },
                None => Classes::Unknown,
            };
            OutputFacts {
                name: &o.name,
                float,
                classes,
                shape: shape_text(&o.shape),
            }
        })
        .collect()
}

fn shape_text(shape: &[Dim]) -> String {
    serde_json::to_string(shape).unwrap_or_default()
}

/// One model of an evaluation, as recorded at upload.
pub struct Entrant<'a> {
    pub name: &'a str,
    pub info: &'a ModelInfo,
    /// The output the request names for this model, if any.
    pub output: Option<&'a str>,
}

/// What the records decide about a new evaluation.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Fit {
    /// Everything fits: the models agree on this class count.
    Fits { classes: usize },
    /// A fact the rules need is not in the records; the engine must load
    /// the models to decide. The text says which.
    Undecided(String),
}

/// Checks a new evaluation against the records: the set feeds every model,
/// each model has a scored output, all agree on C, and the labels fit C.
/// The teacher comes first in `models`.
pub fn fit(models: &[Entrant<'_>], set: &DatasetInfo) -> EngineResult<Fit> {
    let mut classes: Option<(usize, &str)> = None;
    let mut undecided = None;
    for m in models {
        bind(m.info, &set.arrays, m.name)?;
        let outputs = recorded_outputs(m.info);
        match choose_output(&outputs, m.output, m.name)? {
            Some(scored) => agree(&mut classes, scored.classes, m.name)?,
            None => {
                undecided.get_or_insert_with(|| {
                    format!(
                        "the class axis of model '{}' depends on a dimension of the set",
                        m.name
                    )
                });
            }
        }
    }
    if let Some(why) = undecided {
        return Ok(Fit::Undecided(why));
    }
    let (c, _) = classes.expect("at least the teacher");
    check_labels(set.largest_label, c)?;
    check_class_names(set.class_names.as_deref(), c)?;
    Ok(Fit::Fits { classes: c })
}

/// A set's class names must name every class the models score.
pub fn check_class_names(names: Option<&[String]>, classes: usize) -> EngineResult<()> {
    match names {
        Some(names) if names.len() != classes => Err(EngineError::Settings(SettingsError {
            field: "dataset".into(),
            message: format!(
                "the set's class_names has {} names, but the models score {classes} classes",
                names.len()
            ),
        })),
        _ => Ok(()),
    }
}

/// Records the first model's class count, and refuses any other.
pub fn agree<'a>(
    first: &mut Option<(usize, &'a str)>,
    classes: usize,
    name: &'a str,
) -> EngineResult<()> {
    match *first {
        None => {
            *first = Some((classes, name));
            Ok(())
        }
        Some((c, teacher)) if c != classes => Err(mismatch(format!(
            "teacher '{teacher}' scores {c} classes but student '{name}' scores {classes}"
        ))),
        Some(_) => Ok(()),
    }
}

/// The largest label of a set, and the first sample that holds it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct LargestLabel {
    pub value: i64,
    pub sample: u64,
}

/// Labels must lie in [0, C).
pub fn check_labels(largest: Option<LargestLabel>, classes: usize) -> EngineResult<()> {
    match largest {
        Some(l) if l.value as u64 >= classes as u64 => Err(mismatch(format!(
            "label {} at sample {} is outside [0, {classes}): the models score {classes} classes",
            l.value, l.sample
        ))),
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::model::TensorSpec;

    fn spec(name: &str, dtype: &str, shape: Vec<Dim>) -> TensorSpec {
        TensorSpec {
            name: name.into(),
            dtype: dtype.into(),
            shape,
        }
    }

    fn sym(s: &str) -> Dim {
        Dim::Symbol(s.into())
    }

    fn model(outputs: Vec<TensorSpec>) -> ModelInfo {
        ModelInfo {
            parameters: 0,
            macs: None,
            opset: Some(17),
            producer: String::new(),
            inputs: vec![spec(
                "features",
                "float32",
                vec![sym("batch"), Dim::Fixed(4)],
            )],
            outputs,
            external_data: 0,
            notes: Vec::new(),
        }
    }

    fn set(largest: Option<i64>) -> DatasetInfo {
        DatasetInfo {
            samples: 8,
            arrays: vec![
                ArrayInfo {
                    name: Some("features".into()),
                    dtype: "float32".into(),
                    shape: vec![8, 4],
                },
                ArrayInfo {
                    name: Some("labels".into()),
                    dtype: "int64".into(),
                    shape: vec![8],
                },
            ],
            has_labels: true,
            largest_label: largest.map(|value| LargestLabel { value, sample: 3 }),
            class_names: None,
            slice_count: None,
        }
    }

    fn entrant<'a>(name: &'a str, info: &'a ModelInfo) -> Entrant<'a> {
        Entrant {
            name,
            info,
            output: None,
        }
    }

    #[test]
    fn a_predicted_label_output_placed_first_is_passed_over() {
        // metrics.md, "Turning outputs into logits": the first float output
        // that squeezes to [N, C], as scikit-learn converters place an int64
        // label output first.
        let m = model(vec![
            spec("label", "int64", vec![sym("batch")]),
            spec(
                "probabilities",
                "float32",
                vec![sym("batch"), Dim::Fixed(3)],
            ),
        ]);
        let scored = choose_output(&recorded_outputs(&m), None, "tree").unwrap();
        assert_eq!(
            scored,
            Some(Scored {
                index: 1,
                classes: 3
            })
        );
    }

    #[test]
    fn a_named_output_the_model_lacks_is_refused_on_the_output_field() {
        let m = model(vec![spec(
            "logits",
            "float32",
            vec![sym("batch"), Dim::Fixed(3)],
        )]);
        let err = choose_output(&recorded_outputs(&m), Some("probs"), "t").unwrap_err();
        match err {
            EngineError::Settings(s) => {
                assert_eq!(s.field, "output");
                assert!(s.message.contains("'logits'"), "{}", s.message);
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn a_class_axis_that_depends_on_the_set_leaves_the_fit_undecided() {
        let m = model(vec![spec(
            "scores",
            "float32",
            vec![sym("batch"), sym("classes")],
        )]);
        let fit = fit(&[entrant("t", &m)], &set(None)).unwrap();
        assert!(matches!(fit, Fit::Undecided(_)), "{fit:?}");
    }

    #[test]
    fn teacher_and_students_must_agree_on_the_class_count() {
        let t = model(vec![spec(
            "logits",
            "float32",
            vec![sym("batch"), Dim::Fixed(3)],
        )]);
        let s = model(vec![spec(
            "logits",
            "float32",
            vec![sym("batch"), Dim::Fixed(4)],
        )]);
        let err = fit(&[entrant("t", &t), entrant("s", &s)], &set(None)).unwrap_err();
        assert!(
            err.to_string()
                .contains("scores 3 classes but student 's' scores 4"),
            "{err}"
        );
        assert_eq!(
            fit(&[entrant("t", &t), entrant("t2", &t)], &set(Some(2))).unwrap(),
            Fit::Fits { classes: 3 }
        );
    }

    #[test]
    fn a_label_beyond_the_class_count_is_refused_naming_its_sample() {
        let t = model(vec![spec(
            "logits",
            "float32",
            vec![sym("batch"), Dim::Fixed(3)],
        )]);
        let err = fit(&[entrant("t", &t)], &set(Some(3))).unwrap_err();
        assert!(
            err.to_string()
                .contains("label 3 at sample 3 is outside [0, 3)"),
            "{err}"
        );
    }

    #[test]
    fn a_float_array_cannot_feed_an_integer_input() {
        let mut t = model(vec![spec(
            "logits",
            "float32",
            vec![sym("batch"), Dim::Fixed(3)],
        )]);
        t.inputs[0].dtype = "int64".into();
        let err = bind(&t, &set(None).arrays, "t").unwrap_err();
        assert!(err.to_string().contains("without loss"), "{err}");
    }
}
