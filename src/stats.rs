//! The few order statistics the tool reports, defined once.

/// The `q`-quantile (0 ≤ q ≤ 1) of `v` by linear interpolation between order
/// statistics (the "type 7" rule of Hyndman & Fan 1996, common to R and NumPy);
/// `None` when `v` holds no number. Sorts `v`; NaN entries are left out.
pub fn quantile(v: &mut Vec<f64>, q: f64) -> Option<f64> {
    v.retain(|x| !x.is_nan());
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let h = (v.len() - 1) as f64 * q.clamp(0.0, 1.0);
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    Some(v[lo] + (h - lo as f64) * (v[hi] - v[lo]))
}

/// The median of `v` (the mean of the two middle values for an even count).
pub fn median(v: &mut Vec<f64>) -> Option<f64> {
    quantile(v, 0.5)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Values from NumPy's documented default (`numpy.quantile`, method "linear"):
    /// quantile([1, 2, 3, 4], 0.9) = 3.7, median([3, 1, 2, 10]) = 2.5 (recalled from
    /// the documentation's definition, checked by hand here).
    #[test]
    fn linear_quantiles() {
        assert_eq!(median(&mut vec![3.0, 1.0, 2.0, 10.0]), Some(2.5));
        assert_eq!(median(&mut vec![5.0, f64::NAN, 1.0, 3.0]), Some(3.0));
        let q = quantile(&mut vec![4.0, 1.0, 3.0, 2.0], 0.9).unwrap();
        assert!((q - 3.7).abs() < 1e-12);
        assert_eq!(median(&mut Vec::new()), None);
    }
}
