//! The demo horizons' analytic ground truth (the surfaces the generator summed) against the
//! engine: on the noise-free version of each demo horizon, mean curvature at window 3 matches
//! the exact curvature of the analytic surface away from faults, pick gaps and grid edges.
//! The truth is differential geometry of the generator's closed forms (do Carmo 1976, ch. 3);
//! no demo value is used as a check value.

use flexure_engine::curvature::{FlatTolerance, LocalSurface};
use flexure_engine::demo::demo_horizons;
use flexure_engine::grid::Grid;
use flexure_engine::horizon::{positive_down_depth, Velocity, ZUnit};
use flexure_engine::window::{fit_quadrics, WindowSpec};
use std::path::Path;

#[test]
fn noise_free_demo_horizons_match_their_analytic_curvature() {
    for h in demo_horizons() {
        let g = &h.geometry;
        let grid = Grid {
            geometry: g.clone(),
            values: h.values(false),
        };
        let velocity = h.velocity.map_or(Velocity::None, Velocity::Constant);
        let depth =
            positive_down_depth(&grid, Path::new(h.file), h.domain, ZUnit::Metre, &velocity)
                .unwrap();
        let n = 3;
        let field = fit_quadrics(
            depth.view(),
            g,
            &WindowSpec {
                size: n,
                min_valid: 1.0,
            },
            &|_| {},
        )
        .unwrap();
        let (sx, sy) = g.spacing();
        let reach = (n as f64) * sx.max(sy) * 2.0;
        let (mut worst, mut largest, mut compared) = (0.0f64, 0.0f64, 0usize);
        for row in n..g.rows - n {
            for col in n..g.cols - n {
                let (x, y) = g.cell_centre(col, row);
                if h.surface.fault_distance(x, y) < h.fault_gap + reach {
                    continue;
                }
                let Some(q) = field.get(col, row) else {
                    continue;
                };
                let d = h.surface.eval(x, y);
                let exact = d.quadric();
                let truth = LocalSurface::new(&exact, 1.0, FlatTolerance::EXACT).k_mean;
                let fitted = LocalSurface::new(&q, 1.0, FlatTolerance::EXACT).k_mean;
                worst = worst.max((fitted - truth).abs());
                largest = largest.max(truth.abs());
                compared += 1;
            }
        }
        assert!(
            compared > g.cols * g.rows / 2,
            "{}: only {compared} cells compared",
            h.file
        );
        // Discretisation error of a 3-cell window on structures 7 or more cells wide (sigma): a few percent of
        // the largest curvature (Taylor remainder of the quadric fit).
        assert!(
            worst < 0.03 * largest,
            "{}: worst error {worst:e} vs largest {largest:e}",
            h.file
        );
    }
}
