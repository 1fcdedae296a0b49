//! One azimuth population or two: a stage corridor's fast azimuths (axial, period 180 deg)
//! fitted by one von Mises distribution of the doubled angles and by a mixture of two, each by
//! maximum likelihood, the mixture by expectation-maximisation (Dempster, Laird & Rubin 1977;
//! for von Mises components Banerjee, Dhillon, Ghosh & Sra 2005, JMLR 6), compared by the
//! Bayesian information criterion (Schwarz 1978): two trends are reported when the mixture's
//! BIC is lower by at least [`BIC_MARGIN`] and both components are real (each holds at least
//! [`MIN_SHARE`] of the weight and their axes differ by at least [`MIN_SEPARATION_DEG`]).
//!
//! The concentration estimate inverts A(kappa) = I1(kappa)/I0(kappa) with the piecewise
//! approximation of Best & Fisher (1981) (Fisher 1993, *Statistical Analysis of Circular
//! Data*, eq. 4.40); Bessel functions by Abramowitz & Stegun (1964) 9.8.1-9.8.4.

use std::f64::consts::PI;

/// Lower BIC of the two-trend fit needed before two trends are reported (a BIC difference
/// above 6 is "strong" evidence on the scale of Kass & Raftery 1995).
pub const BIC_MARGIN: f64 = 6.0;
/// Least weight share of each trend.
pub const MIN_SHARE: f64 = 0.15;
/// Least angle between the two trends' axes, degrees.
pub const MIN_SEPARATION_DEG: f64 = 25.0;
/// Largest concentration estimated (near-identical samples).
const MAX_KAPPA: f64 = 500.0;
const EM_ITERATIONS: usize = 200;

/// Two azimuth trends found in one set of axial samples.
#[derive(Clone, Debug, PartialEq)]
pub struct TwoTrends {
    /// Axes of the two trends, degrees in [0, 180), the larger share first.
    pub azimuths: [f64; 2],
    /// Weight shares of the two trends (sum 1).
    pub shares: [f64; 2],
    /// BIC of one trend minus BIC of two (positive favours two).
    pub bic_gain: f64,
}

/// A von Mises component on the doubled circle: mean angle (radians) and concentration.
#[derive(Clone, Copy, Debug)]
struct Component {
    mean: f64,
    kappa: f64,
}

impl Component {
    fn log_density(&self, angle: f64) -> f64 {
        self.kappa * (angle - self.mean).cos() - (2.0 * PI).ln() - log_i0(self.kappa)
    }
}

/// Two trends in the axial `samples` (azimuth in degrees, weight > 0), when the data favour
/// them (see the module notes); `None` for one trend or fewer than 8 samples. The likelihoods
/// count the effective number of independent samples: Kish's count for the weights, times
/// [`spatial_factor`] over the `neighbours` pairs (neighbouring bins of a map are alike; an
/// empty list treats the samples as independent).
pub fn two_trends(samples: &[(f64, f64)], neighbours: &[(usize, usize)]) -> Option<TwoTrends> {
    let data: Vec<(f64, f64)> = samples
        .iter()
        .filter(|(a, w)| a.is_finite() && w.is_finite() && *w > 0.0)
        .map(|&(a, w)| ((2.0 * a).to_radians(), w))
        .collect();
    if data.len() < 8 {
        return None;
    }
    // Weights scaled to sum to the effective sample count, so the likelihood counts
    // independent samples: Kish's (sum w)^2 / sum w^2 for unequal weights, shrunk for the
    // likeness of neighbouring samples.
    let total: f64 = data.iter().map(|(_, w)| w).sum();
    let kish = total * total / data.iter().map(|(_, w)| w * w).sum::<f64>();
    let n = (kish * spatial_factor(samples, neighbours)).max(2.0);
    let scale = n / total;
    let data: Vec<(f64, f64)> = data.iter().map(|&(a, w)| (a, w * scale)).collect();
    let one = fit_one(&data, None);
    let log_l1: f64 = data.iter().map(|&(a, w)| w * one.log_density(a)).sum();
    let (two, shares, log_l2) = fit_two(&data, one.mean);
    let bic_gain = (2.0 * log_l2 - 5.0 * n.ln()) - (2.0 * log_l1 - 2.0 * n.ln());
    let azimuths = two.map(|c| (c.mean.to_degrees() / 2.0).rem_euclid(180.0));
    let separation = {
        let d = (azimuths[0] - azimuths[1]).rem_euclid(180.0);
        d.min(180.0 - d)
    };
    let real = shares.iter().all(|&s| s >= MIN_SHARE) && separation >= MIN_SEPARATION_DEG;
    (bic_gain >= BIC_MARGIN && real).then(|| {
        let (a, b) = if shares[0] >= shares[1] {
            (0, 1)
        } else {
            (1, 0)
        };
        TwoTrends {
            azimuths: [azimuths[a], azimuths[b]],
            shares: [shares[a], shares[b]],
            bic_gain,
        }
    })
}

/// The share of the samples' count that is independent information, from the lag-one
/// correlation rho of their doubled-angle unit vectors over the `neighbours` pairs (indices
/// into `samples`, e.g. grid neighbours): (1 - rho) / (1 + rho) for rho > 0, as for a
/// first-order autoregressive series (e.g. Bayley & Hammersley 1946; Zwiers & von Storch
/// 1995), 1 without neighbours or for rho <= 0.
pub fn spatial_factor(samples: &[(f64, f64)], neighbours: &[(usize, usize)]) -> f64 {
    let unit: Vec<(f64, f64)> = samples
        .iter()
        .map(|&(a, _)| (2.0 * a).to_radians().sin_cos())
        .collect();
    let finite: Vec<&(f64, f64)> = unit.iter().filter(|u| u.0.is_finite()).collect();
    if finite.is_empty() || neighbours.is_empty() {
        return 1.0;
    }
    let n = finite.len() as f64;
    let mean = (
        finite.iter().map(|u| u.0).sum::<f64>() / n,
        finite.iter().map(|u| u.1).sum::<f64>() / n,
    );
    let centred = |k: usize| (unit[k].0 - mean.0, unit[k].1 - mean.1);
    let variance = finite
        .iter()
        .map(|u| (u.0 - mean.0).powi(2) + (u.1 - mean.1).powi(2))
        .sum::<f64>()
        / n;
    let pairs: Vec<f64> = neighbours
        .iter()
        .filter(|&&(i, j)| {
            i < unit.len() && j < unit.len() && unit[i].0.is_finite() && unit[j].0.is_finite()
        })
        .map(|&(i, j)| {
            let (a, b) = (centred(i), centred(j));
            a.0 * b.0 + a.1 * b.1
        })
        .collect();
    if pairs.is_empty() || variance <= 0.0 {
        return 1.0;
    }
    let rho = (pairs.iter().sum::<f64>() / pairs.len() as f64 / variance).clamp(-1.0, 0.99);
    if rho > 0.0 {
        (1.0 - rho) / (1.0 + rho)
    } else {
        1.0
    }
}

/// Weighted maximum-likelihood von Mises fit; `resp` weighs each sample further.
fn fit_one(data: &[(f64, f64)], resp: Option<&[f64]>) -> Component {
    let (mut s, mut c, mut total) = (0.0, 0.0, 0.0);
    for (k, &(a, w)) in data.iter().enumerate() {
        let w = w * resp.map_or(1.0, |r| r[k]);
        s += w * a.sin();
        c += w * a.cos();
        total += w;
    }
    let r = if total > 0.0 {
        (s.hypot(c) / total).min(1.0)
    } else {
        0.0
    };
    Component {
        mean: s.atan2(c),
        kappa: kappa_from_resultant(r),
    }
}

/// EM fit of two components from starts on either side of `centre`; the best of several
/// starts (deterministic), with the shares and log-likelihood.
fn fit_two(data: &[(f64, f64)], centre: f64) -> ([Component; 2], [f64; 2], f64) {
    let mut best: Option<([Component; 2], [f64; 2], f64)> = None;
    for offset in [PI / 6.0, PI / 3.0, PI / 2.0, 2.0 * PI / 3.0] {
        for turn in [0.0, PI / 4.0] {
            let start = [
                Component {
                    mean: centre + turn - offset,
                    kappa: 2.0,
                },
                Component {
                    mean: centre + turn + offset,
                    kappa: 2.0,
                },
            ];
            let fit = em(data, start);
            if best.as_ref().is_none_or(|b| fit.2 > b.2) {
                best = Some(fit);
            }
        }
    }
    best.expect("at least one start")
}

fn em(data: &[(f64, f64)], mut components: [Component; 2]) -> ([Component; 2], [f64; 2], f64) {
    let mut shares: [f64; 2] = [0.5, 0.5];
    let mut log_l = f64::NEG_INFINITY;
    for _ in 0..EM_ITERATIONS {
        // E step: responsibilities under the current fit.
        let resp: Vec<[f64; 2]> = data
            .iter()
            .map(|&(a, _)| {
                let l = [0, 1].map(|j| shares[j].ln() + components[j].log_density(a));
                let top = l[0].max(l[1]);
                let sum = (l[0] - top).exp() + (l[1] - top).exp();
                [0, 1].map(|j| (l[j] - top).exp() / sum)
            })
            .collect();
        // M step: shares and each component's weighted fit.
        let weight: f64 = data.iter().map(|(_, w)| w).sum();
        for j in 0..2 {
            let rj: Vec<f64> = resp.iter().map(|r| r[j]).collect();
            let share = data.iter().zip(&rj).map(|((_, w), r)| w * r).sum::<f64>() / weight;
            shares[j] = share.clamp(1e-6, 1.0 - 1e-6);
            components[j] = fit_one(data, Some(&rj));
        }
        // The log-likelihood of the fit just made, so the one returned belongs to it.
        let total = mixture_log_likelihood(data, &components, &shares);
        let converged = total - log_l < 1e-9;
        log_l = total;
        if converged {
            break;
        }
    }
    (components, shares, log_l)
}

/// Weighted log-likelihood of a two-component mixture.
fn mixture_log_likelihood(
    data: &[(f64, f64)],
    components: &[Component; 2],
    shares: &[f64; 2],
) -> f64 {
    data.iter()
        .map(|&(a, w)| {
            let l = [0, 1].map(|j| shares[j].ln() + components[j].log_density(a));
            let top = l[0].max(l[1]);
            w * (top + ((l[0] - top).exp() + (l[1] - top).exp()).ln())
        })
        .sum()
}

/// The concentration kappa with A(kappa) = r (Best & Fisher 1981; Fisher 1993, eq. 4.40).
pub fn kappa_from_resultant(r: f64) -> f64 {
    let kappa = if r < 0.53 {
        2.0 * r + r.powi(3) + 5.0 * r.powi(5) / 6.0
    } else if r < 0.85 {
        -0.4 + 1.39 * r + 0.43 / (1.0 - r)
    } else {
        1.0 / (r.powi(3) - 4.0 * r.powi(2) + 3.0 * r)
    };
    if kappa.is_finite() {
        kappa.clamp(0.0, MAX_KAPPA)
    } else {
        MAX_KAPPA
    }
}

/// I0(x) and I1(x) for x >= 0 as (I0 / s, I1 / s, ln s) with the scale s = 1 for x <= 3.75
/// and s = e^x / sqrt(x) above (Abramowitz & Stegun 1964, 9.8.1-9.8.4; relative error below
/// 2e-7), so large arguments do not overflow.
fn bessel_i0_i1(x: f64) -> (f64, f64, f64) {
    if x <= 3.75 {
        let t = (x / 3.75).powi(2);
        let i0 = 1.0
            + t * (3.515_622_9
                + t * (3.089_942_4
                    + t * (1.206_749_2 + t * (0.265_973_2 + t * (0.036_076_8 + t * 0.004_581_3)))));
        let i1 = x
            * (0.5
                + t * (0.878_905_94
                    + t * (0.514_988_69
                        + t * (0.150_849_34
                            + t * (0.026_587_33 + t * (0.003_015_32 + t * 0.000_324_11))))));
        (i0, i1, 0.0)
    } else {
        let t = 3.75 / x;
        let i0 = 0.398_942_28
            + t * (0.013_285_92
                + t * (0.002_253_19
                    + t * (-0.001_575_65
                        + t * (0.009_162_81
                            + t * (-0.020_577_06
                                + t * (0.026_355_37 + t * (-0.016_476_33 + t * 0.003_923_77)))))));
        let i1 = 0.398_942_28
            + t * (-0.039_880_24
                + t * (-0.003_620_18
                    + t * (0.001_638_01
                        + t * (-0.010_315_55
                            + t * (0.022_829_67
                                + t * (-0.028_953_12 + t * (0.017_876_54 - t * 0.004_200_59)))))));
        (i0, i1, x - 0.5 * x.ln())
    }
}

/// ln I0(x) for x >= 0 (see [`bessel_i0_i1`]).
pub fn log_i0(x: f64) -> f64 {
    let (i0, _, log_scale) = bessel_i0_i1(x);
    i0.ln() + log_scale
}

/// A(kappa) = I1(kappa) / I0(kappa), the mean resultant length of a von Mises distribution
/// (see [`bessel_i0_i1`]).
pub fn mean_resultant_length(kappa: f64) -> f64 {
    let (i0, i1, _) = bessel_i0_i1(kappa);
    i1 / i0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bessel_ratio_matches_tabulated_values() {
        // Abramowitz & Stegun 1964, table 9.8 (from memory): I0(1) = 1.266066, I1(1) =
        // 0.565159, I0(5) = 27.239872, I1(5) = 24.335642.
        assert!((mean_resultant_length(1.0) - 0.565159 / 1.266066).abs() < 1e-6);
        assert!((mean_resultant_length(5.0) - 24.335642 / 27.239872).abs() < 1e-6);
        assert!((log_i0(5.0) - 27.239872f64.ln()).abs() < 1e-6);
    }

    #[test]
    fn kappa_inverts_the_mean_resultant_length() {
        // Best & Fisher's approximation is within about 1% of the exact inverse (Fisher 1993).
        for kappa in [0.5, 1.0, 2.0, 4.0, 8.0, 20.0] {
            let back = kappa_from_resultant(mean_resultant_length(kappa));
            assert!((back / kappa - 1.0).abs() < 0.03, "{kappa}: {back}");
        }
    }
}
