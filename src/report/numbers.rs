//! Numbers rounded for reading, shared by the command line and the pages:
//! a few significant digits, never sixteen.

/// `x` with four significant digits (whole numbers from 1000 on), e.g.
/// 0.0022960000000000003 as "0.002296" and 1234.5 as "1234".
pub fn significant(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let magnitude = x.abs().log10().floor() as i32;
    let decimals = (3 - magnitude).max(0) as usize;
    let text = format!("{x:.decimals$}");
    // Trailing zeros after the point say nothing.
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// An interval as "[lo, hi]" with `significant` ends.
pub fn interval(ci: [f64; 2]) -> String {
    format!("[{}, {}]", significant(ci[0]), significant(ci[1]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn figures_keep_four_significant_digits() {
        assert_eq!(significant(0.0022960000000000003), "0.002296");
        assert_eq!(significant(0.9), "0.9");
        assert_eq!(significant(0.88123), "0.8812");
        assert_eq!(significant(12.3456), "12.35");
        assert_eq!(significant(1234.5), "1234");
        assert_eq!(significant(336887.0), "336887");
        assert_eq!(significant(-0.05), "-0.05");
        assert_eq!(significant(0.0), "0");
        assert_eq!(interval([0.51234, 0.6]), "[0.5123, 0.6]");
    }
}
