//! Statistics of a Monte Carlo campaign: the one-sided Clopper-Pearson
//! upper confidence bound on the probability of an unsafe case, from the
//! exact binomial distribution (Clopper and Pearson, Biometrika 26 (1934)
//! 404-413), checked against `scipy.stats.beta.ppf` in
//! `tests/tests/campaign_stats_scipy.rs`.

/// ln P(X <= k) for X ~ Binomial(n, p), 0 < p < 1, summed in log space.
fn ln_binom_cdf(k: u64, n: u64, p: f64) -> f64 {
    let (lp, lq) = (p.ln(), (-p).ln_1p());
    // ln of the i-th term: ln C(n, i) + i ln p + (n - i) ln(1 - p).
    let mut term = n as f64 * lq;
    let mut terms = Vec::with_capacity(k as usize + 1);
    terms.push(term);
    for i in 0..k {
        term += ((n - i) as f64 / (i + 1) as f64).ln() + lp - lq;
        terms.push(term);
    }
    let m = terms.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    m + terms.iter().map(|t| (t - m).exp()).sum::<f64>().ln()
}

/// The one-sided upper confidence bound at `confidence` (e.g. 0.95) on the
/// probability of an event seen `k` times in `n` trials: the `p` with
/// `P(X <= k | n, p) = 1 - confidence` (1 when `k = n`). `None` when `n`
/// is 0, `k > n` or the confidence is not in (0, 1).
pub fn clopper_pearson_upper(k: u64, n: u64, confidence: f64) -> Option<f64> {
    if n == 0 || k > n || !(confidence > 0.0 && confidence < 1.0) {
        return None;
    }
    if k == n {
        return Some(1.0);
    }
    let target = (1.0 - confidence).ln();
    // The CDF falls as p rises: bisect.
    let (mut lo, mut hi) = (0.0f64, 1.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= 0.0 || mid >= 1.0 {
            break;
        }
        if ln_binom_cdf(k, n, mid) > target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_events_give_the_rule_of_three_bound() {
        // k = 0: 1 - 0.05^(1/n) exactly (about 3/n, the "rule of three",
        // common practice).
        for n in [20u64, 100, 1000] {
            let u = clopper_pearson_upper(0, n, 0.95).unwrap();
            let exact = 1.0 - 0.05f64.powf(1.0 / n as f64);
            assert!((u - exact).abs() < 1e-12, "{n}: {u} vs {exact}");
        }
    }

    #[test]
    fn all_events_and_bad_inputs() {
        assert_eq!(clopper_pearson_upper(5, 5, 0.95), Some(1.0));
        assert_eq!(clopper_pearson_upper(0, 0, 0.95), None);
        assert_eq!(clopper_pearson_upper(3, 2, 0.95), None);
        assert_eq!(clopper_pearson_upper(1, 2, 1.0), None);
        // More events, higher bound.
        let a = clopper_pearson_upper(1, 100, 0.95).unwrap();
        let b = clopper_pearson_upper(2, 100, 0.95).unwrap();
        assert!(a < b && a > 0.01);
    }
}
