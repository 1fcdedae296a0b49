//! Jobs: each strings reading, the computation and writing together for one command, from one
//! options struct. The command line only fills the struct and prints the report.

mod anisotropy;
mod curvature;
mod render;

pub use crate::anisotropy::VectorAxis;
pub use anisotropy::{
    AnisotropyJob, AnisotropyReport, AzimuthReference, WeightSource, HTI_CAUTION,
};
pub use curvature::{CurvatureJob, CurvatureReport, VelocitySource, WindowReport};
pub use render::{RenderJob, RenderReport};

/// Progress of a long job, in units of grid rows fitted.
pub trait Progress: Sync {
    /// A job of `total` units starts.
    fn begin(&self, total: u64);
    /// `done` more units are finished.
    fn advance(&self, done: u64);
    /// The job is over.
    fn finish(&self);
}

/// Progress that reports nothing.
pub struct Silent;

impl Progress for Silent {
    fn begin(&self, _total: u64) {}
    fn advance(&self, _done: u64) {}
    fn finish(&self) {}
}

/// (min, max) of the finite values, if any.
pub(crate) fn value_range(v: &ndarray::Array2<f32>) -> Option<(f32, f32)> {
    v.iter()
        .filter(|x| x.is_finite())
        .fold(None, |acc, &x| match acc {
            None => Some((x, x)),
            Some((lo, hi)) => Some((lo.min(x), hi.max(x))),
        })
}
