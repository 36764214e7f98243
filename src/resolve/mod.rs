//! Resolution of D = C·Sᵀ: linear least squares and NNLS, soft resolution (MCR-ALS), the global
//! model fit and the classic two-wavelength estimates. Not written yet (see the issues).
