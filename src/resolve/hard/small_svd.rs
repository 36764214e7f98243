//! Thin SVD of small, tall matrices (a design matrix: samples × a few species) by one-sided
//! Jacobi rotations, shared by the reduced path's projection and the columnwise path's
//! per-wavelength solves.

/// Thin SVD of a small, tall matrix by one-sided Jacobi rotations (Hestenes, J. Soc. Ind. Appl.
/// Math. 6 (1958) 51; Demmel & Veselić, SIAM J. Matrix Anal. Appl. 13 (1992) 1204: accurate to
/// working precision): the range basis and the pseudo-inverse with the rank rule of the reduced
/// path. For the few columns of a design matrix this is many times cheaper than a LAPACK call
/// per wavelength or per evaluation of the reduced cost. Plain row-major slices: every column of A is a contiguous row of Aᵀ.
pub(super) struct SmallSvd {
    /// Rows of the matrix.
    pub n: usize,
    /// Numerical rank.
    pub rank: usize,
    /// Uᵀ, rank × n: an orthonormal basis of the range, one basis vector per row.
    pub ut: Vec<f64>,
    /// The pseudo-inverse A⁺, k × n.
    pub pinv: Vec<f64>,
    /// All k singular values, largest first.
    pub sigma: Vec<f64>,
}

/// aᵀb with eight partial sums: a single running sum is one long chain of dependent additions
/// (the sweeps' dot products were most of the time of an SVD); the partial sums let the
/// processor overlap them. Rounding differs from the sequential sum only in the order of the
/// additions.
pub(super) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let (ca, cb) = (a.chunks_exact(8), b.chunks_exact(8));
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in ca.zip(cb) {
        for i in 0..8 {
            acc[i] += x[i] * y[i];
        }
    }
    ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7])) + tail
}

impl SmallSvd {
    /// From Aᵀ (k × n, row-major), consumed.
    pub fn of_transposed(mut at: Vec<f64>, k: usize, n: usize) -> Self {
        let mut v = vec![0.0; k * k]; // Vᵀ, row-major: row p is column p of V
        for p in 0..k {
            v[p * k + p] = 1.0;
        }
        let rotate = |m: &mut [f64], len: usize, p: usize, q: usize, c: f64, s: f64| {
            let (head, tail) = m.split_at_mut(q * len);
            let (rp, rq) = (&mut head[p * len..(p + 1) * len], &mut tail[..len]);
            for (a, b) in rp.iter_mut().zip(rq.iter_mut()) {
                let (x, y) = (*a, *b);
                *a = c * x - s * y;
                *b = s * x + c * y;
            }
        };
        for _sweep in 0..60 {
            let mut rotated = false;
            for p in 0..k {
                for q in p + 1..k {
                    let (rp, rq) = (&at[p * n..(p + 1) * n], &at[q * n..(q + 1) * n]);
                    let (alpha, beta, gamma) = (dot(rp, rp), dot(rq, rq), dot(rp, rq));
                    if gamma == 0.0 || gamma.abs() <= f64::EPSILON * (alpha * beta).sqrt() {
                        continue;
                    }
                    rotated = true;
                    let zeta = (beta - alpha) / (2.0 * gamma);
                    let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                    let c = 1.0 / (1.0 + t * t).sqrt();
                    let s = c * t;
                    rotate(&mut at, n, p, q, c, s);
                    rotate(&mut v, k, p, q, c, s);
                }
            }
            if !rotated {
                break;
            }
        }
        // A·V = U·Σ: the rotated columns are σ_a·u_a
        let sigma: Vec<f64> = (0..k)
            .map(|a| {
                let r = &at[a * n..(a + 1) * n];
                dot(r, r).sqrt()
            })
            .collect();
        let smax = sigma.iter().fold(0.0f64, |m, s| m.max(*s));
        let tol = smax * (n.max(k) as f64) * f64::EPSILON;
        let kept: Vec<usize> = (0..k).filter(|&a| sigma[a] > tol).collect();
        let mut ut = vec![0.0; kept.len() * n];
        let mut pinv = vec![0.0; k * n];
        for (c, &a) in kept.iter().enumerate() {
            let row = &mut ut[c * n..(c + 1) * n];
            for (u, x) in row.iter_mut().zip(&at[a * n..(a + 1) * n]) {
                *u = x / sigma[a];
            }
            // A⁺ = V Σ⁻¹ Uᵀ: row b gains V[b, a]/σ_a · u_a, V[b, a] = Vᵀ[a, b]
            for b in 0..k {
                let f = v[a * k + b] / sigma[a];
                for (pi, u) in pinv[b * n..(b + 1) * n].iter_mut().zip(row.iter()) {
                    *pi += f * u;
                }
            }
        }
        let mut sigma = sigma;
        sigma.sort_by(|a, b| b.total_cmp(a));
        Self {
            n,
            rank: kept.len(),
            ut,
            pinv,
            sigma,
        }
    }

    /// Uᵀ·z (rank).
    pub fn ut_dot(&self, z: &[f64]) -> Vec<f64> {
        self.ut.chunks_exact(self.n).map(|u| dot(u, z)).collect()
    }

    /// z − U·(Uᵀz), in place: the part of z outside the range.
    pub fn project_out(&self, z: &mut [f64]) {
        let coef = self.ut_dot(z);
        for (u, c) in self.ut.chunks_exact(self.n).zip(coef) {
            for (zi, ui) in z.iter_mut().zip(u) {
                *zi -= c * ui;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, s};
    use ndarray_linalg::{JobSvd, SVDDC};
    use proptest::prelude::*;

    fn max_abs<'b>(v: impl IntoIterator<Item = &'b f64>) -> f64 {
        v.into_iter().fold(0.0f64, |m, x| m.max(x.abs()))
    }

    #[test]
    fn the_jacobi_svd_gives_lapacks_projector_and_pseudo_inverse() {
        use rand::Rng;
        let mut g = crate::testing::rng(3);
        for (n, k, rank) in [
            (8usize, 3usize, 3usize),
            (30, 6, 6),
            (12, 5, 2),
            (5, 1, 1),
            (6, 3, 0),
        ] {
            // A = B·C with B n × rank and C rank × k: rank `rank`, scaled columns
            let b = Array2::from_shape_fn((n, rank), |_| g.random_range(-1.0..1.0));
            let c = Array2::from_shape_fn((rank, k), |(_, j)| {
                g.random_range(-1.0..1.0) * 10f64.powi(j as i32)
            });
            let a = b.dot(&c);
            let svd = SmallSvd::of_transposed(a.t().iter().copied().collect(), k, n);
            let ours_u = Array2::from_shape_vec((svd.rank, n), svd.ut.clone())
                .unwrap()
                .reversed_axes();
            let ours_pinv = Array2::from_shape_vec((k, n), svd.pinv.clone()).unwrap();
            // Reference: LAPACK's divide-and-conquer SVD (dgesdd, OpenBLAS build) with the
            // same rank rule
            let (u, s, vt) = a.clone().svddc(JobSvd::Some).unwrap();
            let (u, vt) = (u.unwrap(), vt.unwrap());
            let tol = s[0] * (n.max(k) as f64) * f64::EPSILON;
            let rank_ref = s.iter().filter(|&&v| v > tol).count();
            assert_eq!(svd.rank, rank_ref, "rank of {n} × {k}");
            for (ours, theirs) in svd.sigma.iter().zip(&s) {
                assert!(
                    (ours - theirs).abs() <= 1e-12 * s[0],
                    "singular values of {n} × {k}"
                );
            }
            let u_ref = u.slice(s![.., ..rank_ref]);
            let pinv_ref = Array2::from_shape_fn((k, n), |(b, i)| {
                (0..rank_ref).map(|c| vt[[c, b]] * u[[i, c]] / s[c]).sum::<f64>()
            });
            let p_ours = ours_u.dot(&ours_u.t());
            let p_ref = u_ref.dot(&u_ref.t());
            assert!(max_abs((&p_ours - &p_ref).iter()) < 1e-10, "projector {n} × {k}");
            let scale = max_abs(pinv_ref.iter()).max(1.0);
            assert!(
                max_abs((&ours_pinv - &pinv_ref).iter()) < 1e-10 * scale,
                "pseudo-inverse {n} × {k}"
            );
        }
    }

    proptest! {
        /// The four Penrose conditions (Penrose, Proc. Camb. Phil. Soc. 51 (1955) 406) define
        /// A⁺ uniquely: A A⁺ A = A, A⁺ A A⁺ = A⁺, and A A⁺, A⁺ A symmetric.
        #[test]
        fn the_pseudo_inverse_meets_the_penrose_conditions(
            (n, k, values) in (1usize..12, 1usize..5).prop_flat_map(|(n, k)| {
                (Just(n + k), Just(k), proptest::collection::vec(-1.0f64..1.0, (n + k) * k))
            })
        ) {
            let a = Array2::from_shape_vec((n, k), values).unwrap();
            let svd = SmallSvd::of_transposed(a.t().iter().copied().collect(), k, n);
            let p = Array2::from_shape_vec((k, n), svd.pinv.clone()).unwrap();
            let scale = max_abs(a.iter()).max(1e-300) * max_abs(p.iter()).max(1.0);
            let apa = a.dot(&p).dot(&a);
            prop_assert!(max_abs((&apa - &a).iter()) <= 1e-10 * scale.max(1.0));
            let pap = p.dot(&a).dot(&p);
            prop_assert!(max_abs((&pap - &p).iter()) <= 1e-10 * scale * max_abs(p.iter()).max(1.0));
            let ap = a.dot(&p);
            prop_assert!(max_abs((&ap - &ap.t()).iter()) <= 1e-10 * scale);
            let pa = p.dot(&a);
            prop_assert!(max_abs((&pa - &pa.t()).iter()) <= 1e-10 * scale);
        }
    }
}
