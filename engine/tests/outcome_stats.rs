//! The statistics that tie stage metrics to outcomes, and the two-trend test of a corridor:
//! Spearman's rho and its bootstrap interval against scipy.stats (spearmanr, bootstrap), the
//! order-keeping permutation test's false-positive rate on autocorrelated noise (Monte Carlo),
//! and mixture detection on von Mises corridors sampled by Best & Fisher (1979).

use flexure_engine::stats::mixture::{mean_resultant_length, two_trends};
use flexure_engine::stats::rank::{rank_test, spearman, Dependence};
use flexure_engine::stats::SeededNoise;
use flexure_engine::synthetic::von_mises;

/// Runs `/usr/bin/python3` (numpy and scipy from Debian: `scripts/install-system-deps.sh
/// --test`) on `script` and returns its stdout.
fn python(script: &str) -> String {
    let o = std::process::Command::new("/usr/bin/python3")
        .args(["-c", script])
        .output()
        .expect("python3 with scipy: run `bash scripts/install-system-deps.sh --test`");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout).to_string()
}

/// 25 pairs with a moderate monotone relation, ties and one missing value.
fn sample_pairs() -> (Vec<f64>, Vec<f64>) {
    let mut rng = SeededNoise::new(7);
    let x: Vec<f64> = (0..25).map(|_| (rng.uniform() * 20.0).round()).collect();
    let mut y: Vec<f64> = x.iter().map(|v| v * 0.3 + 2.0 * rng.gaussian()).collect();
    y[4] = f64::NAN;
    (x, y)
}

fn list(v: &[f64]) -> String {
    let items: Vec<String> = v
        .iter()
        .map(|x| format!("{x:?}").replace("NaN", "float('nan')"))
        .collect();
    format!("[{}]", items.join(","))
}

#[test]
fn spearman_and_its_bootstrap_interval_match_scipy() {
    // Reference: scipy.stats.spearmanr (nan_policy='omit') for rho, exactly up to rounding;
    // scipy.stats.bootstrap (paired, percentile method, 20000 resamples) for the 95% interval,
    // within Monte Carlo error (0.04 on each end).
    let (x, y) = sample_pairs();
    let out = python(&format!(
        "import numpy as np, scipy.stats as st\n\
         x=np.array({}); y=np.array({}); m=~np.isnan(y); x=x[m]; y=y[m]\n\
         r=st.spearmanr(x,y).statistic\n\
         b=st.bootstrap((x,y), lambda a,b: st.spearmanr(a,b).statistic, paired=True, vectorized=False, n_resamples=20000, method='percentile', confidence_level=0.95, random_state=1)\n\
         print(r, b.confidence_interval.low, b.confidence_interval.high)",
        list(&x),
        list(&y)
    ));
    let v: Vec<f64> = out.split_whitespace().map(|t| t.parse().unwrap()).collect();
    let rho = spearman(&x, &y).unwrap();
    assert!((rho - v[0]).abs() < 1e-12, "{rho} vs scipy {}", v[0]);
    let test = rank_test(&[(x, y)], Dependence::Independent, 0.95, 20000, 99, 3).unwrap();
    assert_eq!(test.n, 24);
    assert!(
        (test.ci.0 - v[1]).abs() < 0.04,
        "{:?} vs scipy {v:?}",
        test.ci
    );
    assert!(
        (test.ci.1 - v[2]).abs() < 0.04,
        "{:?} vs scipy {v:?}",
        test.ci
    );
}

/// An AR(1) series of length `n` with coefficient `phi` (stationary start).
fn ar1(rng: &mut SeededNoise, n: usize, phi: f64) -> Vec<f64> {
    let mut v = rng.gaussian() / (1.0 - phi * phi).sqrt();
    (0..n)
        .map(|_| {
            v = phi * v + rng.gaussian();
            v
        })
        .collect()
}

/// Share of `trials` in which independent AR(1) metric and outcome series on 3 wells of 20
/// stages get p < 0.05 under `dependence`.
fn false_positive_rate(dependence: Dependence, trials: u64) -> f64 {
    let mut hits = 0;
    for t in 0..trials {
        let mut rng = SeededNoise::new(1000 + t);
        let wells: Vec<(Vec<f64>, Vec<f64>)> = (0..3)
            .map(|_| (ar1(&mut rng, 20, 0.8), ar1(&mut rng, 20, 0.8)))
            .collect();
        let test = rank_test(&wells, dependence, 0.95, 0, 199, t).unwrap();
        if test.p_value < 0.05 {
            hits += 1;
        }
    }
    hits as f64 / trials as f64
}

#[test]
fn the_order_keeping_permutation_test_holds_its_level_on_autocorrelated_noise() {
    // Monte Carlo: metric and outcome independent, each AR(1) with phi = 0.8 along the well
    // (neighbouring stages alike). A test at 5% must reject about 5% of the time: the
    // circular-shift test stays within binomial error of 0.05 over 400 trials (sd 0.011, so
    // below 0.085), while plainly permuting stages, which ignores the order, rejects far more
    // often (the reason for the scheme; Fortin & Jacquez 2000).
    let kept = false_positive_rate(Dependence::Ordered, 400);
    let naive = false_positive_rate(Dependence::Independent, 400);
    assert!(kept < 0.085, "circular shift: {kept}");
    assert!(naive > 0.15, "plain permutation: {naive}");
}

#[test]
fn a_real_relation_along_wells_is_found() {
    // Outcome = metric + noise on 3 wells of 20 stages: the test must see it (p at its floor).
    let mut rng = SeededNoise::new(5);
    let wells: Vec<(Vec<f64>, Vec<f64>)> = (0..3)
        .map(|_| {
            let m = ar1(&mut rng, 20, 0.5);
            let o = m.iter().map(|v| v + 0.5 * rng.gaussian()).collect();
            (m, o)
        })
        .collect();
    let t = rank_test(&wells, Dependence::Ordered, 0.95, 2000, 999, 1).unwrap();
    assert!(t.rho > 0.7 && t.p_value < 0.01 && t.ci.0 > 0.4, "{t:?}");
}

#[test]
fn best_fisher_sampling_has_the_von_mises_mean_resultant_length() {
    // Reference: A(kappa) = I1/I0 (Mardia & Jupp 2000, eq. 3.5.31) from Abramowitz & Stegun's
    // Bessel approximations; 20000 draws, standard error below 0.005.
    for kappa in [0.5, 2.0, 8.0] {
        let mut rng = SeededNoise::new(kappa as u64 + 1);
        let (mut s, mut c) = (0.0, 0.0);
        for _ in 0..20000 {
            let a = von_mises(&mut rng, 1.0, kappa);
            s += (a - 1.0).sin();
            c += (a - 1.0).cos();
        }
        let r = s.hypot(c) / 20000.0;
        assert!(
            (r - mean_resultant_length(kappa)).abs() < 0.02,
            "{kappa}: {r}"
        );
    }
}

/// A corridor of `n` fast azimuths (degrees): trends at `axes` (degrees) with `shares`, each
/// von Mises with concentration `kappa` on the doubled angle.
fn corridor(
    rng: &mut SeededNoise,
    n: usize,
    axes: &[f64],
    shares: &[f64],
    kappa: f64,
) -> Vec<(f64, f64)> {
    (0..n)
        .map(|k| {
            let mut pick = 0;
            let mut acc = shares[0];
            let u = (k as f64 + 0.5) / n as f64;
            while u > acc && pick + 1 < axes.len() {
                pick += 1;
                acc += shares[pick];
            }
            let doubled = von_mises(rng, (2.0 * axes[pick]).to_radians(), kappa);
            ((doubled / 2.0).to_degrees().rem_euclid(180.0), 1.0)
        })
        .collect()
}

#[test]
fn one_trend_is_not_split_and_two_trends_are_found() {
    // Monte Carlo over 200 seeds per case, 40 bins per corridor (a typical stage corridor):
    // one trend (doubled-angle kappa 1.5, 6, 30: axial spreads of about 30, 12 and 5 deg) is
    // flagged in at most 5% of corridors; two trends 60 to 90 deg apart with comparable shares
    // (kappa 6) are flagged in at least 90%, with both axes within 12 deg of the truth.
    for kappa in [1.5, 6.0, 30.0] {
        let flagged = (0..200)
            .filter(|&s| {
                let mut rng = SeededNoise::new(s);
                two_trends(&corridor(&mut rng, 40, &[50.0], &[1.0], kappa), &[]).is_some()
            })
            .count();
        assert!(flagged <= 10, "kappa {kappa}: {flagged} of 200 flagged");
    }
    for (gap, share) in [(60.0, 0.5), (75.0, 0.6), (90.0, 0.5), (90.0, 0.65)] {
        let truth = [20.0, 20.0 + gap];
        let mut found = 0;
        for s in 0..200 {
            let mut rng = SeededNoise::new(10_000 + s);
            let samples = corridor(&mut rng, 40, &truth, &[share, 1.0 - share], 6.0);
            if let Some(t) = two_trends(&samples, &[]) {
                let near = |a: f64, b: f64| {
                    let d = (a - b).rem_euclid(180.0);
                    d.min(180.0 - d) < 12.0
                };
                let matched = (near(t.azimuths[0], truth[0]) && near(t.azimuths[1], truth[1]))
                    || (near(t.azimuths[0], truth[1]) && near(t.azimuths[1], truth[0]));
                if matched {
                    found += 1;
                }
            }
        }
        assert!(found >= 180, "gap {gap}, share {share}: {found} of 200");
    }
}

#[test]
fn a_smooth_single_trend_corridor_is_not_split_into_two() {
    // A corridor of 20 x 3 bins whose fast azimuth wanders smoothly about one trend (Gaussian
    // noise smoothed over 3 bins, axial spread about 20 deg): neighbouring bins are alike, so
    // counting them as independent finds "two trends" in a third of such corridors (a review
    // Monte Carlo). With the neighbour correction at most 5% of 200 are flagged.
    let (cols, rows) = (20usize, 3usize);
    let neighbours: Vec<(usize, usize)> = (0..rows)
        .flat_map(|r| (0..cols).map(move |c| (r, c)))
        .flat_map(|(r, c)| {
            let k = r * cols + c;
            let right = (c + 1 < cols).then_some((k, k + 1));
            let down = (r + 1 < rows).then_some((k, k + cols));
            right.into_iter().chain(down)
        })
        .collect();
    let flagged = (0..200u64)
        .filter(|&seed| {
            let mut rng = SeededNoise::new(50_000 + seed);
            let pad = 8;
            let (w, h) = (cols + 2 * pad, rows + 2 * pad);
            let white: Vec<f64> = (0..w * h).map(|_| rng.gaussian()).collect();
            let sigma = 3.0f64;
            let smooth = |r: usize, c: usize| {
                let mut v = 0.0;
                for rr in 0..h {
                    for cc in 0..w {
                        let d2 = ((rr as f64 - r as f64).powi(2) + (cc as f64 - c as f64).powi(2))
                            / (2.0 * sigma * sigma);
                        v += (-d2).exp() * white[rr * w + cc];
                    }
                }
                v
            };
            let field: Vec<f64> = (0..rows)
                .flat_map(|r| (0..cols).map(move |c| (r, c)))
                .map(|(r, c)| smooth(r + pad, c + pad))
                .collect();
            let sd = (field.iter().map(|v| v * v).sum::<f64>() / field.len() as f64).sqrt();
            let samples: Vec<(f64, f64)> =
                field.iter().map(|v| (50.0 + 20.0 * v / sd, 1.0)).collect();
            two_trends(&samples, &neighbours).is_some()
        })
        .count();
    assert!(
        flagged <= 10,
        "{flagged} of 200 smooth single-trend corridors flagged"
    );
}
