//! The one drawing system: [`axis`] (linear axes with round ticks), [`colour`] scales, [`map`] pictures (hillshade, cell colours,
//! vectors, the quicklook frame) and [`figure`] (rose diagrams, sheets, polar charts as SVG and
//! PNG), with [`ticks`] at round values. No file I/O.

pub mod axis;
pub mod colour;
pub mod figure;
pub mod map;
pub mod ticks;
