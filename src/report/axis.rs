//! Axis ranges, tick positions and the formatting of numbers for people, shared by the plots
//! and the text report.
//!
//! Ticks fall on "nice" numbers, 1, 2 or 5 times a power of ten (common practice in charting),
//! chosen so that about five to eight ticks span the axis.

/// A step of 1, 2 or 5 × 10^k close to `span / target` ticks.
pub fn nice_step(span: f64, target: usize) -> f64 {
    let raw = (span / target.max(1) as f64).abs();
    if !(raw.is_finite() && raw > 0.0) {
        return 1.0;
    }
    let power = 10f64.powf(raw.log10().floor());
    let fraction = raw / power;
    let nice = if fraction < 1.5 {
        1.0
    } else if fraction < 3.5 {
        2.0
    } else if fraction < 7.5 {
        5.0
    } else {
        10.0
    };
    nice * power
}

/// Tick positions: the multiples of a nice step that lie in `[low, high]`.
pub fn ticks(low: f64, high: f64, target: usize) -> Vec<f64> {
    let step = nice_step(high - low, target);
    let first = (low / step - 1e-9).ceil() as i64;
    let last = (high / step + 1e-9).floor() as i64;
    // Round each tick to the step's decimals so that 3 × 0.2 is 0.6, not 0.6000000000000001.
    let scale = 10f64.powi((-step.log10().floor()).max(0.0) as i32);
    (first..=last)
        .map(|i| ((i as f64 * step) * scale).round() / scale + 0.0)
        .collect()
}

/// Ticks for a logarithmic axis over `[low, high]` (both > 0): 1, 2 and 5 × 10^k, thinned to
/// the powers of ten when there would be more than twelve, filled in with every digit when
/// there would be fewer than three.
pub fn log_ticks(low: f64, high: f64) -> Vec<f64> {
    if !(low > 0.0 && high > low) {
        return Vec::new();
    }
    let first = low.log10().floor() as i32;
    let last = high.log10().ceil() as i32;
    let pick = |mantissas: &[f64]| -> Vec<f64> {
        (first..=last)
            .flat_map(|k| mantissas.iter().map(move |m| m * 10f64.powi(k)))
            .filter(|t| *t >= low * (1.0 - 1e-12) && *t <= high * (1.0 + 1e-12))
            .collect()
    };
    let ticks = pick(&[1.0, 2.0, 5.0]);
    if ticks.len() > 12 {
        pick(&[1.0])
    } else if ticks.len() < 3 {
        pick(&[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0])
    } else {
        ticks
    }
}

/// The smallest range with nice ends that holds `[low, high]`.
pub fn nice_range(low: f64, high: f64, target: usize) -> (f64, f64) {
    let (low, high) = if high > low {
        (low, high)
    } else {
        let pad = if low == 0.0 { 1.0 } else { low.abs() * 0.1 };
        (low - pad, high + pad)
    };
    let step = nice_step(high - low, target);
    ((low / step).floor() * step, (high / step).ceil() * step)
}

/// A tick label: the tick value with as many decimals as the step needs and no more.
pub fn tick_label(value: f64, step: f64) -> String {
    let decimals = if step >= 1.0 {
        0
    } else {
        (-step.log10().floor()) as usize
    };
    let text = format!("{value:.decimals$}");
    if text.starts_with('-') && text[1..].chars().all(|c| c == '0' || c == '.') {
        text[1..].to_string()
    } else {
        text
    }
}

/// A number for a table: six significant digits without trailing zeros, fixed notation for
/// magnitudes from 1e-4 to 1e6, scientific outside that.
pub fn format_number(x: f64) -> String {
    if x == 0.0 {
        return "0".to_string();
    }
    if !x.is_finite() {
        return x.to_string();
    }
    let magnitude = x.abs().log10().floor();
    if (-4.0..6.0).contains(&magnitude) {
        let decimals = (5.0 - magnitude).max(0.0) as usize;
        let text = format!("{x:.decimals$}");
        if text.contains('.') {
            text.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            text
        }
    } else {
        format!("{x:.5e}")
    }
}

/// A p-value for a table: four decimals, or scientific below 1e-4.
pub fn format_p_value(p: f64) -> String {
    if p < 1e-4 {
        format!("{p:.2e}")
    } else {
        format!("{p:.4}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_fall_on_nice_numbers() {
        assert_eq!(ticks(0.0, 1.0, 5), vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        assert_eq!(ticks(1.85, 4.2, 5), vec![2.0, 2.5, 3.0, 3.5, 4.0]);
        assert_eq!(nice_range(0.013, 0.47, 5), (0.0, 0.5));
        assert_eq!(tick_label(0.6, 0.2), "0.6");
        assert_eq!(tick_label(-0.0, 0.05), "0.00");
        assert_eq!(tick_label(1500.0, 500.0), "1500");
        assert_eq!(
            log_ticks(14.0, 7200.0),
            vec![20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0, 5000.0]
        );
        assert_eq!(log_ticks(2.0, 7.0), vec![2.0, 3.0, 4.0, 5.0, 6.0, 7.0]);
    }

    #[test]
    fn numbers_keep_six_significant_digits() {
        assert_eq!(format_number(0.362580834), "0.362581");
        assert_eq!(format_number(-13.0213468), "-13.0213");
        assert_eq!(format_number(2.06), "2.06");
        assert_eq!(format_number(4.0), "4");
        assert_eq!(format_number(2.5e-7), "2.50000e-7");
        assert_eq!(format_p_value(0.0252391), "0.0252");
        assert_eq!(format_p_value(3.2e-9), "3.20e-9");
    }
}
