//! Bars for proportions in tables (per-class and per-slice agreement).
//! They start at a floor below the lowest value shown, not at 0: on a 0..1
//! scale 0.93 and 0.97 would be bars a few pixels apart. The floor is said
//! in words beside every table that uses it.

use maud::{Markup, html};

/// Bar length at 1.0, in pixels.
const WIDTH_PX: f64 = 200.0;
/// The floor never goes under this; lower values get a stub marked
/// "below the scale", so that one bad class cannot flatten the rest.
const LOWEST_FLOOR: f64 = 0.5;

pub(in crate::web) struct BarScale {
    floor: f64,
}

impl BarScale {
    /// The floor: the lowest value less 0.05, rounded down to a tenth,
    /// and no lower than 0.5.
    pub(in crate::web) fn for_values(values: impl Iterator<Item = f64>) -> BarScale {
        let lowest = values.fold(1.0_f64, f64::min);
        let floor = ((lowest - 0.05) * 10.0).floor() / 10.0;
        BarScale {
            floor: floor.clamp(LOWEST_FLOOR, 0.9),
        }
    }

    pub(in crate::web) fn width(&self, v: f64) -> f64 {
        (WIDTH_PX * (v - self.floor) / (1.0 - self.floor)).clamp(2.0, WIDTH_PX)
    }

    /// A bar with the value's own text beside it. Drawn as SVG: the
    /// pages' content security policy allows no inline styles.
    pub(in crate::web) fn bar(&self, v: f64, text: Markup) -> Markup {
        html! {
            svg.bars width=(WIDTH_PX) height="10" viewBox=(format!("0 0 {WIDTH_PX} 10")) aria-hidden="true" {
                rect.track width=(WIDTH_PX) height="10" {}
                rect.bar width=(format!("{:.1}", self.width(v))) height="10" data-value=(v) {}
            }
            " " (text)
            @if v < self.floor { " " span.below { "(below the scale)" } }
        }
    }

    /// The sentence that says where bars start.
    pub(in crate::web) fn note(&self) -> String {
        format!(
            "Bars run from {:.1} (left edge) to 1.0, not from 0, so that small differences show.",
            self.floor
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bars_for_0_93_and_0_97_differ_by_more_than_a_few_pixels() {
        let s = BarScale::for_values([0.93, 0.97].into_iter());
        assert!(s.width(0.97) - s.width(0.93) > 20.0);
        let low = BarScale::for_values([0.0, 0.93, 0.97].into_iter());
        assert!(
            low.width(0.97) - low.width(0.93) > 12.0,
            "one bad class must not flatten the rest"
        );
    }
}
