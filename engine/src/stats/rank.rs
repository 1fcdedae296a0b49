//! Rank correlation of outcomes (what a stage or well did) against stage metrics (angle to
//! well, magnitude, ...), with an uncertainty that respects how the data were gathered.
//!
//! - Spearman's rho (Spearman 1904): Pearson's correlation of the ranks, ties given their
//!   average rank (as `scipy.stats.spearmanr`). Along wells, each well's rho, averaged with
//!   weights equal to its stage count (a stratified statistic: differences between wells,
//!   which a handful of wells cannot separate from well design or geology, stay out of it).
//! - Confidence interval: percentile bootstrap (Efron & Tibshirani 1993, *An Introduction to
//!   the Bootstrap*, ch. 13). Independent units (wells) are resampled as pairs; stages along a
//!   well, which are not independent of their neighbours, by the circular block bootstrap of
//!   Politis & Romano (1992), blocks of `ceil(n^(1/2))` stages within each well (longer than
//!   the n^(1/3) rate of Hall, Horowitz & Jing 1995, which left the interval too narrow on
//!   strongly autocorrelated stage series of 20 in a Monte Carlo review). The interval
//!   describes the spread; the permutation p-value is the test.
//! - p-value: a permutation test that keeps each well's order: every well's outcome series is
//!   shifted circularly by its own random offset (the circular-shift, or toroidal, test for
//!   autocorrelated series; e.g. Fortin & Jacquez 2000), so the dependence between neighbouring
//!   stages survives in every draw; independent units are plainly permuted. Two-sided:
//!   `p = (1 + #{|rho*| >= |rho|}) / (1 + draws)` (Phipson & Smyth 2010).
//!
//! - Many tests at once: [`false_discovery_adjusted`] gives the Benjamini-Hochberg adjusted
//!   p-values (q-values) of a family of tests.
//!
//! Missing values (NaN) drop their pair; every draw is seeded, so results are reproducible.

use super::{quantile, Quantile, SeededNoise};

/// How the units of a test depend on each other.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Dependence {
    /// Each group is a series in order (stages along a well): blocks and circular shifts.
    Ordered,
    /// Every pair is an independent unit (wells): pairs resampled and permuted.
    Independent,
}

/// The result of a rank test.
#[derive(Clone, Debug, PartialEq)]
pub struct RankTest {
    /// Pairs with both values finite, in the units that contribute to rho.
    pub n: usize,
    /// Spearman's rho.
    pub rho: f64,
    /// Percentile bootstrap interval of rho at the requested level.
    pub ci: (f64, f64),
    /// Two-sided permutation p-value.
    pub p_value: f64,
}

/// Ranks 1..=n of `values`, ties given the average of the ranks they span.
pub fn average_ranks(values: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..values.len()).collect();
    order.sort_by(|&a, &b| values[a].total_cmp(&values[b]));
    let mut ranks = vec![0.0; values.len()];
    let mut start = 0;
    while start < order.len() {
        let mut end = start + 1;
        while end < order.len() && values[order[end]] == values[order[start]] {
            end += 1;
        }
        let rank = (start + end + 1) as f64 / 2.0;
        for &k in &order[start..end] {
            ranks[k] = rank;
        }
        start = end;
    }
    ranks
}

/// Spearman's rho of the finite pairs of `x` and `y`; `None` with fewer than 3 pairs or when
/// either side is constant.
pub fn spearman(x: &[f64], y: &[f64]) -> Option<f64> {
    let (x, y): (Vec<f64>, Vec<f64>) = x
        .iter()
        .zip(y)
        .filter(|(a, b)| a.is_finite() && b.is_finite())
        .map(|(a, b)| (*a, *b))
        .unzip();
    if x.len() < 3 {
        return None;
    }
    pearson(&average_ranks(&x), &average_ranks(&y))
}

fn pearson(x: &[f64], y: &[f64]) -> Option<f64> {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx) * (a - mx);
        syy += (b - my) * (b - my);
    }
    (sxx > 0.0 && syy > 0.0).then(|| (sxy / (sxx * syy).sqrt()).clamp(-1.0, 1.0))
}

/// Spearman's rho of `groups` (each a pair of series: metric, outcome; a longer side's extra
/// values are ignored): for ordered groups the average of the groups' own rhos weighted by
/// their pairs (see [`statistic`]), for independent pairs the rho of all pairs,
/// with its bootstrap interval at `level` (e.g. 0.95) from `resamples` draws and its
/// permutation p-value from `permutations` draws, seeded by `seed`. `None` when rho is
/// undefined (fewer than 3 finite pairs, or a constant side).
pub fn rank_test(
    groups: &[(Vec<f64>, Vec<f64>)],
    dependence: Dependence,
    level: f64,
    resamples: usize,
    permutations: usize,
    seed: u64,
) -> Option<RankTest> {
    let units = units(groups, dependence);
    let identity: Vec<Vec<usize>> = units
        .iter()
        .map(|u| (0..u.members.len()).collect())
        .collect();
    let parts = series(&units, &identity, groups, Draw::Bootstrap);
    let rho = statistic(&parts)?;
    // Pairs of the units that contribute a rho (a well with fewer than 3 pairs or a constant
    // side does not).
    let n = parts
        .iter()
        .filter(|(x, y)| spearman(x, y).is_some())
        .flat_map(|(x, y)| x.iter().zip(y))
        .filter(|(a, b)| a.is_finite() && b.is_finite())
        .count();
    let mut rng = SeededNoise::new(seed);
    let mut boot: Vec<f64> = (0..resamples)
        .filter_map(|_| {
            let picks: Vec<Vec<usize>> = units.iter().map(|u| u.resample(&mut rng)).collect();
            statistic(&series(&units, &picks, groups, Draw::Bootstrap))
        })
        .collect();
    let tail = (1.0 - level) / 2.0;
    let ci = (
        quantile(&mut boot, tail, Quantile::Linear).unwrap_or(f64::NAN),
        quantile(&mut boot, 1.0 - tail, Quantile::Linear).unwrap_or(f64::NAN),
    );
    let mut rng = SeededNoise::new(seed ^ 0x9E37_79B9_7F4A_7C15);
    let mut extreme = 0usize;
    for _ in 0..permutations {
        let picks: Vec<Vec<usize>> = units.iter().map(|u| u.permute(&mut rng)).collect();
        if statistic(&series(&units, &picks, groups, Draw::Permutation))
            .is_some_and(|r| r.abs() >= rho.abs() - 1e-12)
        {
            extreme += 1;
        }
    }
    Some(RankTest {
        n,
        rho,
        ci,
        p_value: (1 + extreme) as f64 / (1 + permutations) as f64,
    })
}

/// The test statistic over the units' (metric, outcome) series: each unit's Spearman rho,
/// averaged with weights equal to its finite pairs (one unit: its rho). For ordered groups
/// (wells) this is the association along the wells; differences between wells, which
/// circular shifts within wells cannot test, do not enter it.
fn statistic(parts: &[(Vec<f64>, Vec<f64>)]) -> Option<f64> {
    let (sum, weight) = parts
        .iter()
        .filter_map(|(x, y)| {
            let n = x
                .iter()
                .zip(y)
                .filter(|(a, b)| a.is_finite() && b.is_finite())
                .count() as f64;
            spearman(x, y).map(|r| (r * n, n))
        })
        .fold((0.0, 0.0), |(s, w), (r, n)| (s + r, w + n));
    (weight > 0.0).then(|| sum / weight)
}

/// The resampling units: one series per group (ordered), or one unit holding every pair
/// (independent).
struct Unit {
    /// (group, index) of each member, in order.
    members: Vec<(usize, usize)>,
    dependence: Dependence,
}

fn units(groups: &[(Vec<f64>, Vec<f64>)], dependence: Dependence) -> Vec<Unit> {
    let members = |g: usize| (0..groups[g].0.len().min(groups[g].1.len())).map(move |i| (g, i));
    match dependence {
        Dependence::Ordered => (0..groups.len())
            .map(|g| Unit {
                members: members(g).collect(),
                dependence,
            })
            .filter(|u| !u.members.is_empty())
            .collect(),
        Dependence::Independent => vec![Unit {
            members: (0..groups.len()).flat_map(members).collect(),
            dependence,
        }],
    }
}

impl Unit {
    /// Positions (into `members`) of a bootstrap resample of the same length.
    fn resample(&self, rng: &mut SeededNoise) -> Vec<usize> {
        let n = self.members.len();
        match self.dependence {
            Dependence::Independent => (0..n).map(|_| draw(rng, n)).collect(),
            Dependence::Ordered => {
                let block = (n as f64).sqrt().ceil() as usize;
                let mut picks = Vec::with_capacity(n + block);
                while picks.len() < n {
                    let start = draw(rng, n);
                    picks.extend((0..block).map(|k| (start + k) % n));
                }
                picks.truncate(n);
                picks
            }
        }
    }

    /// Positions of the outcome paired with each member in a permutation draw.
    fn permute(&self, rng: &mut SeededNoise) -> Vec<usize> {
        let n = self.members.len();
        match self.dependence {
            Dependence::Ordered => {
                let shift = draw(rng, n);
                (0..n).map(|k| (k + shift) % n).collect()
            }
            Dependence::Independent => {
                // Fisher-Yates (Knuth, TAOCP vol. 2, algorithm P).
                let mut order: Vec<usize> = (0..n).collect();
                for k in (1..n).rev() {
                    order.swap(k, draw(rng, k + 1));
                }
                order
            }
        }
    }
}

/// A uniform integer in 0..n.
fn draw(rng: &mut SeededNoise, n: usize) -> usize {
    ((rng.uniform() * n as f64) as usize).min(n - 1)
}

fn value(groups: &[(Vec<f64>, Vec<f64>)], (g, i): (usize, usize), outcome: bool) -> f64 {
    if outcome {
        groups[g].1[i]
    } else {
        groups[g].0[i]
    }
}

/// How a draw pairs the series: a bootstrap draw takes whole (metric, outcome) pairs at the
/// picked positions; a permutation draw keeps the metrics in place and moves the outcomes.
#[derive(Clone, Copy, PartialEq)]
enum Draw {
    Bootstrap,
    Permutation,
}

/// Each unit's (metric, outcome) series for the picked positions of a draw.
fn series(
    units: &[Unit],
    picks: &[Vec<usize>],
    groups: &[(Vec<f64>, Vec<f64>)],
    draw: Draw,
) -> Vec<(Vec<f64>, Vec<f64>)> {
    units
        .iter()
        .zip(picks)
        .map(|(u, p)| {
            p.iter()
                .enumerate()
                .map(|(i, &k)| {
                    let metric_at = if draw == Draw::Bootstrap { k } else { i };
                    (
                        value(groups, u.members[metric_at], false),
                        value(groups, u.members[k], true),
                    )
                })
                .unzip()
        })
        .collect()
}

/// Benjamini-Hochberg adjusted p-values of a family of tests, in the order given: with the
/// m finite p-values sorted ascending, `q_(i) = min over j >= i of min(1, m p_(j) / j)`
/// (Benjamini & Hochberg 1995, J. R. Stat. Soc. B 57:289-300; the adjusted-value form of
/// their step-up procedure). Taking every test with `q <= alpha` as a finding keeps the
/// expected share of false findings among them at most alpha for independent tests, and for
/// positively dependent ones (Benjamini & Yekutieli 2001, Ann. Stat. 29:1165-1188). NaN
/// p-values stay NaN and do not count in m.
pub fn false_discovery_adjusted(p_values: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..p_values.len())
        .filter(|&i| p_values[i].is_finite())
        .collect();
    order.sort_by(|&a, &b| p_values[a].total_cmp(&p_values[b]));
    let m = order.len() as f64;
    let mut adjusted = vec![f64::NAN; p_values.len()];
    let mut running = 1.0f64;
    for (rank, &i) in order.iter().enumerate().rev() {
        running = running.min(m * p_values[i] / (rank + 1) as f64);
        adjusted[i] = running;
    }
    adjusted
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn false_discovery_adjustment_follows_benjamini_and_hochberg() {
        // Benjamini & Hochberg (1995), section 4 (the 15 p-values of their worked example,
        // from memory): at a false discovery rate of 0.05 the step-up procedure takes the
        // four smallest. By hand from the definition: q of the 4th is 15 x 0.0095 / 4 =
        // 0.035625; the 5th is min over j >= 5 of 15 p_(j) / j = 15 x 0.0201 / 5 = 0.0603.
        let p = [
            0.0201, 0.0001, 0.0004, 0.0019, 0.0095, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262,
            0.5719, 0.6528, 0.7590, 1.0,
        ];
        let q = false_discovery_adjusted(&p);
        assert_eq!(q.iter().filter(|&&q| q <= 0.05).count(), 4);
        assert!((q[4] - 0.035625).abs() < 1e-15);
        assert!((q[0] - 0.0603).abs() < 1e-15);
        assert_eq!(q[14], 1.0);
        // Against the definition summed directly, on seeded random p-values with ties and a
        // missing value: min over j >= i of min(1, m p_(j) / j), ranks counted from 1.
        let mut rng = SeededNoise::new(61);
        let mut p: Vec<f64> = (0..40)
            .map(|_| (rng.uniform() * 20.0).floor() / 20.0)
            .collect();
        p[7] = f64::NAN;
        let q = false_discovery_adjusted(&p);
        let mut sorted: Vec<f64> = p.iter().copied().filter(|v| v.is_finite()).collect();
        sorted.sort_by(f64::total_cmp);
        let m = sorted.len() as f64;
        for (i, &pi) in p.iter().enumerate() {
            if pi.is_nan() {
                assert!(q[i].is_nan());
                continue;
            }
            // The highest rank among ties: its step-up value is the smallest of theirs.
            let rank = sorted.iter().rposition(|&v| v == pi).unwrap();
            let expected = (rank..sorted.len())
                .map(|j| (m * sorted[j] / (j + 1) as f64).min(1.0))
                .fold(f64::INFINITY, f64::min);
            assert!(
                (q[i] - expected).abs() < 1e-15,
                "p {pi}: {} vs {expected}",
                q[i]
            );
            assert!(q[i] >= pi);
        }
    }

    #[test]
    fn ranks_average_ties_as_scipy_rankdata() {
        // scipy.stats.rankdata([3, 1, 4, 1, 5]) = [3, 1.5, 4, 1.5, 5] (method 'average').
        assert_eq!(
            average_ranks(&[3.0, 1.0, 4.0, 1.0, 5.0]),
            vec![3.0, 1.5, 4.0, 1.5, 5.0]
        );
    }

    #[test]
    fn spearman_is_one_for_monotone_pairs_and_drops_missing_values() {
        // Definition (Spearman 1904): any strictly increasing relation has rho = 1.
        let x = [1.0, 2.0, 3.0, 4.0, f64::NAN];
        let y = [1.0, 8.0, 27.0, 64.0, 5.0];
        assert_eq!(spearman(&x, &y), Some(1.0));
        assert_eq!(spearman(&[1.0, 2.0], &[2.0, 1.0]), None);
        assert_eq!(spearman(&[1.0, 1.0, 1.0], &[2.0, 1.0, 3.0]), None);
    }
}
