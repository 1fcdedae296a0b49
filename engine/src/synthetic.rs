//! Analytic horizon surfaces with exact first and second derivatives. They build the demo
//! data and give the tests and benches their ground truth; compiled with the `synthetic`
//! feature only (the seeded noise source they are usually paired with is
//! [`crate::stats::SeededNoise`]).
//!
//! All surfaces are positive down (depth-like): a surface that is shallower at its centre is an
//! antiform. Coordinates are map x (east) and y (north) in CRS units.
//! Derivatives follow from elementary calculus on each closed form.

use crate::grid::GridGeometry;
use crate::surface::window::Quadric;
use ndarray::Array2;

/// Value and exact derivatives of a surface at a point.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Derivatives {
    /// Value (positive down, CRS units or the stored unit).
    pub z: f64,
    /// dz/dx.
    pub zx: f64,
    /// dz/dy.
    pub zy: f64,
    /// d2z/dx2.
    pub zxx: f64,
    /// d2z/dxdy.
    pub zxy: f64,
    /// d2z/dy2.
    pub zyy: f64,
}

impl Derivatives {
    /// The osculating quadric at the point (Taylor expansion to second order): the exact local
    /// surface a window fit approximates, `a = z_xx/2`, `b = z_yy/2`, `c = z_xy`, `d = z_x`,
    /// `e = z_y`, `f = z`.
    pub fn quadric(&self) -> Quadric {
        Quadric {
            a: self.zxx / 2.0,
            b: self.zyy / 2.0,
            c: self.zxy,
            d: self.zx,
            e: self.zy,
            f: self.z,
        }
    }
}

impl std::ops::Add for Derivatives {
    type Output = Derivatives;
    fn add(self, o: Derivatives) -> Derivatives {
        Derivatives {
            z: self.z + o.z,
            zx: self.zx + o.zx,
            zy: self.zy + o.zy,
            zxx: self.zxx + o.zxx,
            zxy: self.zxy + o.zxy,
            zyy: self.zyy + o.zyy,
        }
    }
}

/// One analytic surface element.
#[derive(Clone, Debug, PartialEq)]
pub enum Shape {
    /// `z = a x^2 + b y^2 + c x y + d x + e y + f`, with x, y measured from `origin`.
    Quadratic {
        origin: (f64, f64),
        coeffs: [f64; 6],
    },
    /// Spherical cap, positive down: `z = apex + R - sqrt(R^2 - rho^2)` (a dome of radius R);
    /// defined for rho < R.
    SphereDome {
        centre: (f64, f64),
        radius: f64,
        apex: f64,
    },
    /// Gaussian dome (amplitude > 0) or basin (< 0): `z = -A exp(-rho^2 / (2 s^2))`.
    GaussianDome {
        centre: (f64, f64),
        amplitude: f64,
        sigma: f64,
    },
    /// Cylindrical Gaussian fold whose axis runs at `axis_azimuth` degrees clockwise from
    /// north through `origin`: `z = -A exp(-w^2 / (2 s^2))`, w the distance across the axis.
    /// A > 0 is an anticline, A < 0 a syncline.
    Fold {
        origin: (f64, f64),
        axis_azimuth: f64,
        amplitude: f64,
        sigma: f64,
    },
    /// A fault step: `throw` is added on the right-hand side of the trace running at
    /// `azimuth` degrees through `origin` (derivatives zero off the trace).
    Step {
        origin: (f64, f64),
        azimuth: f64,
        throw: f64,
    },
}

impl Shape {
    /// Value and derivatives at map point (x, y).
    pub fn eval(&self, x: f64, y: f64) -> Derivatives {
        match *self {
            Shape::Quadratic { origin, coeffs } => {
                let (u, v) = (x - origin.0, y - origin.1);
                let [a, b, c, d, e, f] = coeffs;
                Derivatives {
                    z: a * u * u + b * v * v + c * u * v + d * u + e * v + f,
                    zx: 2.0 * a * u + c * v + d,
                    zy: 2.0 * b * v + c * u + e,
                    zxx: 2.0 * a,
                    zxy: c,
                    zyy: 2.0 * b,
                }
            }
            Shape::SphereDome {
                centre,
                radius,
                apex,
            } => {
                let (u, v) = (x - centre.0, y - centre.1);
                let s = (radius * radius - u * u - v * v).sqrt();
                let s3 = s * s * s;
                Derivatives {
                    z: apex + radius - s,
                    zx: u / s,
                    zy: v / s,
                    zxx: 1.0 / s + u * u / s3,
                    zxy: u * v / s3,
                    zyy: 1.0 / s + v * v / s3,
                }
            }
            Shape::GaussianDome {
                centre,
                amplitude,
                sigma,
            } => {
                let (u, v) = (x - centre.0, y - centre.1);
                let s2 = sigma * sigma;
                let g = amplitude * (-(u * u + v * v) / (2.0 * s2)).exp();
                Derivatives {
                    z: -g,
                    zx: g * u / s2,
                    zy: g * v / s2,
                    zxx: g * (1.0 / s2 - u * u / (s2 * s2)),
                    zxy: -g * u * v / (s2 * s2),
                    zyy: g * (1.0 / s2 - v * v / (s2 * s2)),
                }
            }
            Shape::Fold {
                origin,
                axis_azimuth,
                amplitude,
                sigma,
            } => {
                let (sa, ca) = axis_azimuth.to_radians().sin_cos();
                // Unit normal to an axis (sin az, cos az): (cos az, -sin az).
                let (nx, ny) = (ca, -sa);
                let w = (x - origin.0) * nx + (y - origin.1) * ny;
                let s2 = sigma * sigma;
                let g = amplitude * (-(w * w) / (2.0 * s2)).exp();
                let (d1, d2) = (g * w / s2, g * (1.0 / s2 - w * w / (s2 * s2)));
                Derivatives {
                    z: -g,
                    zx: d1 * nx,
                    zy: d1 * ny,
                    zxx: d2 * nx * nx,
                    zxy: d2 * nx * ny,
                    zyy: d2 * ny * ny,
                }
            }
            Shape::Step {
                origin,
                azimuth,
                throw,
            } => Derivatives {
                z: if self.side_of(origin, azimuth, x, y) > 0.0 {
                    throw
                } else {
                    0.0
                },
                ..Derivatives::default()
            },
        }
    }

    /// Signed distance of (x, y) to the right of the line through `origin` at `azimuth`.
    fn side_of(&self, origin: (f64, f64), azimuth: f64, x: f64, y: f64) -> f64 {
        let (sa, ca) = azimuth.to_radians().sin_cos();
        (x - origin.0) * ca - (y - origin.1) * sa
    }

    /// Distance from (x, y) to a fault trace; `None` for shapes that are not faults.
    pub fn fault_distance(&self, x: f64, y: f64) -> Option<f64> {
        match *self {
            Shape::Step {
                origin, azimuth, ..
            } => Some(self.side_of(origin, azimuth, x, y).abs()),
            _ => None,
        }
    }
}

/// A sum of shapes plus a constant datum.
#[derive(Clone, Debug, PartialEq)]
pub struct Surface {
    /// Constant added everywhere (e.g. regional depth).
    pub datum: f64,
    /// Elements summed.
    pub shapes: Vec<Shape>,
}

impl Surface {
    /// Value and derivatives of the sum at (x, y).
    pub fn eval(&self, x: f64, y: f64) -> Derivatives {
        let base = Derivatives {
            z: self.datum,
            ..Derivatives::default()
        };
        self.shapes.iter().fold(base, |acc, s| acc + s.eval(x, y))
    }

    /// Samples the surface at every cell centre of `geometry` (`[row, col]`).
    pub fn sample(&self, geometry: &GridGeometry) -> Array2<f64> {
        Array2::from_shape_fn((geometry.rows, geometry.cols), |(r, c)| {
            let (x, y) = geometry.cell_centre(c, r);
            self.eval(x, y).z
        })
    }

    /// Smallest distance from (x, y) to any fault trace of the surface (infinite if none).
    pub fn fault_distance(&self, x: f64, y: f64) -> f64 {
        self.shapes
            .iter()
            .filter_map(|s| s.fault_distance(x, y))
            .fold(f64::INFINITY, f64::min)
    }
}

/// A von Mises deviate with mean direction `mu` and concentration `kappa` (radians), by the
/// rejection algorithm of Best & Fisher (1979), *Applied Statistics* 28(2), 152-157;
/// uniform on the circle when `kappa` is below 1e-6.
pub fn von_mises(rng: &mut crate::stats::SeededNoise, mu: f64, kappa: f64) -> f64 {
    use std::f64::consts::PI;
    if kappa < 1e-6 {
        return mu + PI * (2.0 * rng.uniform() - 1.0);
    }
    let tau = 1.0 + (1.0 + 4.0 * kappa * kappa).sqrt();
    let rho = (tau - (2.0 * tau).sqrt()) / (2.0 * kappa);
    let r = (1.0 + rho * rho) / (2.0 * rho);
    loop {
        let (u1, u2, u3) = (rng.uniform(), rng.uniform(), rng.uniform());
        let z = (PI * u1).cos();
        let f = (1.0 + r * z) / (r + z);
        let c = kappa * (r - f);
        if c * (2.0 - c) - u2 > 0.0 || (c / u2).ln() + 1.0 - c >= 0.0 {
            let theta = f.clamp(-1.0, 1.0).acos();
            return if u3 > 0.5 { mu + theta } else { mu - theta };
        }
    }
}

/// Ricker wavelet (Ricker 1953; REFERENCES.md section 8) of peak frequency `peak_hz` at `t_ms`
/// milliseconds from its centre: `(1 - 2 pi^2 f^2 t^2) exp(-pi^2 f^2 t^2)`, 1 at the centre.
pub fn ricker(peak_hz: f64, t_ms: f64) -> f64 {
    let a = (std::f64::consts::PI * peak_hz * t_ms / 1000.0).powi(2);
    (1.0 - 2.0 * a) * (-a).exp()
}

/// Samples `first..first + count` (sample `j` at time `j dt_ms`) of a trace holding Ricker
/// wavelets of peak frequency `peak_hz` at the given `(time_ms, amplitude)` events.
pub fn ricker_samples(
    first: isize,
    count: usize,
    dt_ms: f64,
    peak_hz: f64,
    events: &[(f64, f64)],
) -> Vec<f32> {
    (first..first + count as isize)
        .map(|j| {
            let t = j as f64 * dt_ms;
            events
                .iter()
                .map(|&(at, amplitude)| amplitude * ricker(peak_hz, t - at))
                .sum::<f64>() as f32
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Central differences of the value check the closed-form derivatives (numerical
    /// differentiation, second order).
    fn check_derivatives(shape: &Shape, x: f64, y: f64) {
        let h = 1e-3;
        let z = |x: f64, y: f64| shape.eval(x, y).z;
        let d = shape.eval(x, y);
        let zx = (z(x + h, y) - z(x - h, y)) / (2.0 * h);
        let zy = (z(x, y + h) - z(x, y - h)) / (2.0 * h);
        let zxx = (z(x + h, y) - 2.0 * z(x, y) + z(x - h, y)) / (h * h);
        let zyy = (z(x, y + h) - 2.0 * z(x, y) + z(x, y - h)) / (h * h);
        let zxy =
            (z(x + h, y + h) - z(x + h, y - h) - z(x - h, y + h) + z(x - h, y - h)) / (4.0 * h * h);
        for (num, exact) in [
            (zx, d.zx),
            (zy, d.zy),
            (zxx, d.zxx),
            (zxy, d.zxy),
            (zyy, d.zyy),
        ] {
            assert!(
                (num - exact).abs() < 1e-5 * (1.0 + exact.abs()),
                "{shape:?}: {num} vs {exact}"
            );
        }
    }

    #[test]
    fn closed_form_derivatives_match_finite_differences() {
        let shapes = [
            Shape::Quadratic {
                origin: (10.0, 20.0),
                coeffs: [0.001, -0.002, 0.0005, 0.1, -0.2, 5.0],
            },
            Shape::SphereDome {
                centre: (0.0, 0.0),
                radius: 1000.0,
                apex: 100.0,
            },
            Shape::GaussianDome {
                centre: (50.0, -30.0),
                amplitude: 40.0,
                sigma: 300.0,
            },
            Shape::Fold {
                origin: (0.0, 0.0),
                axis_azimuth: 35.0,
                amplitude: -25.0,
                sigma: 200.0,
            },
        ];
        for s in &shapes {
            check_derivatives(s, 120.0, -85.0);
        }
    }

    #[test]
    fn step_adds_throw_on_the_right() {
        // A north-running trace: east is its right-hand side.
        let s = Shape::Step {
            origin: (0.0, 0.0),
            azimuth: 0.0,
            throw: 40.0,
        };
        assert_eq!(s.eval(10.0, 0.0).z, 40.0);
        assert_eq!(s.eval(-10.0, 0.0).z, 0.0);
        assert_eq!(s.fault_distance(-10.0, 5.0), Some(10.0));
    }
}
