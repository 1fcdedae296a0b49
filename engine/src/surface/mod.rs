//! The surface of a horizon, from the grid to its attributes: [`horizon`] turns a read grid
//! into positive-down depth in CRS length units, [`window`] fits a local quadric in a window
//! around every cell (the one window driver, streaming tiles), [`curvature`] evaluates the
//! attributes of the fitted quadrics, and [`study`] weighs noise against detail to choose the
//! window.

pub mod curvature;
pub mod horizon;
pub mod study;
pub mod window;
