//! Resolution of D = diag(b)·C·Sᵀ: linear least squares and NNLS. Soft resolution (MCR-ALS) and
//! the global model fit are being written (see the issues).

pub mod linear;
pub mod lm;
