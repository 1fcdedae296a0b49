//! Wells and their stages: [`trajectory`] reads surveys and paths into wells (minimum
//! curvature) and checks stage tables; [`corridor`] gives the grid bins of a stage corridor,
//! their statistics, bilinear sampling and the drilling score.

pub mod corridor;
pub mod trajectory;
