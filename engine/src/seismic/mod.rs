//! Seismic traces: measurements made on the samples of azimuth-sectored volumes.
//!
//! [`shift`] measures the time shift of one trace against a reference inside a tapered window
//! around a horizon, with its correlation quality; [`sectors`] measures every sector of a bin
//! against the mean trace or a given reference.

pub mod sectors;
pub mod shift;
