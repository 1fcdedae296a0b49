//! flexure-engine: curvature attributes from local quadric fits to interpreted horizon grids,
//! azimuthal anisotropy from sector grids, co-rendered maps, well and stage analysis, and a
//! window-size study.
//!
//! Data flows one way, and the folders follow it: [`io`] reads a raster into a [`grid::Grid`];
//! [`surface`] turns it into positive-down depth in CRS length units
//! ([`surface::horizon`]), fits a local quadric at every cell ([`surface::window`]) and
//! evaluates the attributes ([`surface::curvature`]); [`io`] writes them. [`jobs`] strings
//! these together for the command line. [`anisotropy`] fits the cos 2phi model of
//! azimuth-sector traveltimes in every bin; its map vectors ([`anisotropy::vectors`]) are
//! written through OGR by [`io::vector`].
//! [`bands`] reads what the two band tables say about a band (unit, colour-scale kind, vector
//! role) for every band, also one read back from a file by its name.
//! [`draw`] draws maps of any band with vectors and a hillshade ([`draw::colour`],
//! [`draw::map`]) and roses and charts as SVG and PNG ([`draw::figure`]). [`wells`]
//! ([`wells::trajectory`], [`wells::corridor`]) and [`stats::circular`] give stage corridors
//! and their statistics; [`surface::study`] measures noise against detail. [`stats`] holds the
//! shared order statistics and the seeded noise source.
//!
//! The library holds no demo: the invented demo scenario lives in the command line's crate
//! (`flexure-cli`). With the cargo feature `synthetic` (off by default), `synthetic` gives
//! analytic surfaces with exact derivatives, the ground truth of the demo data, tests and
//! benches.

pub mod anisotropy;
pub mod bands;
pub mod draw;
pub mod error;
pub mod grid;
pub mod io;
pub mod jobs;
pub mod provenance;
pub mod seismic;
pub mod stats;
pub mod surface;
#[cfg(feature = "synthetic")]
pub mod synthetic;
pub mod wells;
