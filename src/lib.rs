//! emsplan: expected mean squares, error terms, power and cost for planned experiments.

pub mod dist;
