//! Number formatting for the screen, the event log and the CLI's tables.
//!
//! Values are rounded to what the encoder can resolve, so the last digit does not flicker
//! with noise below one count, and `-0.00` never appears.

/// Decimal places worth showing for an axis with `counts_per_unit` counts per unit: enough
/// to show one count, no more.
pub fn decimals_for(counts_per_unit: f64) -> usize {
    if !(counts_per_unit.is_finite() && counts_per_unit > 0.0) {
        return 3;
    }
    counts_per_unit.log10().ceil().clamp(0.0, 4.0) as usize
}

/// `v` with `d` decimals, right-aligned in `w` columns, without a negative zero.
pub fn num(v: f64, d: usize, w: usize) -> String {
    let s = format!("{v:>w$.d$}");
    if s.trim_start().starts_with('-') && s.trim_start()[1..].chars().all(|c| c == '0' || c == '.')
    {
        return format!("{:>w$}", &s.trim_start()[1..]);
    }
    s
}

/// `v` with an explicit sign and `d` decimals in `w` columns (duty), without `-0.0`.
pub fn signed(v: f64, d: usize, w: usize) -> String {
    let s = format!("{v:>+w$.d$}");
    let t = s.trim_start();
    if t.starts_with('-') && t[1..].chars().all(|c| c == '0' || c == '.') {
        return format!("{:>w$}", format!("+{}", &t[1..]));
    }
    s
}

/// A number as typed into a prompt: shortest form that reads back the same.
pub fn plain(v: f64) -> String {
    format!("{v}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_follow_resolution() {
        assert_eq!(decimals_for(24.0), 2); // 0.042 mm per count
        assert_eq!(decimals_for(240.0), 3);
        assert_eq!(decimals_for(1.0), 0);
        assert_eq!(decimals_for(1e9), 4);
    }

    #[test]
    fn no_negative_zero() {
        assert_eq!(num(-0.001, 2, 6), "  0.00");
        assert_eq!(num(-1.5, 1, 5), " -1.5");
        assert_eq!(signed(-0.04, 1, 6), "  +0.0");
        assert_eq!(signed(12.34, 1, 6), " +12.3");
        assert_eq!(signed(-12.34, 1, 6), " -12.3");
    }
}
