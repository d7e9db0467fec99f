//! Diagnostics of a least-squares fit from its weighted Jacobian: standard
//! errors, correlations and the condition number.
//!
//! With `J` the weighted Jacobian of the residuals with respect to the model
//! parameters at the optimum, `m` residuals and `p` free parameters, the
//! covariance is `s^2 (J^T J)^{-1}` with `s^2 = SSR / (m - p)` (the usual
//! nonlinear-regression estimate, e.g. Seber & Wild 1989, ch. 2). The
//! inverse is taken through the eigen-decomposition of `J^T J` after
//! scaling each parameter to unit diagonal (Jacobi rotations; the matrix is
//! at most 4 x 4), which also gives the condition number of the scaled
//! matrix: a ratio of eigenvalues, free of the parameters' units. A
//! direction whose eigenvalue is below `1e-14` of the largest is treated as
//! not identified: the parameters it involves get no standard error.

/// Eigenvalues below this fraction of the largest count as zero.
pub const SINGULAR_REL: f64 = 1e-14;

/// Covariance diagnostics of `p` free parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct Covariance {
    /// Standard errors (`None`: not identified).
    pub se: Vec<Option<f64>>,
    /// Correlations (`None` where a standard error is missing).
    pub corr: Vec<Vec<Option<f64>>>,
    /// Condition number of the unit-diagonal `J^T J` (`None` when singular).
    pub condition_number: Option<f64>,
}

/// Symmetric eigen-decomposition by cyclic Jacobi rotations: returns the
/// eigenvalues and the eigenvectors as the columns of `v` (row-major).
pub fn symmetric_eigen(a: &[f64], n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut a = a.to_vec();
    let mut v = vec![0.0; n * n];
    for i in 0..n {
        v[i * n + i] = 1.0;
    }
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i * n + j].powi(2))
            .sum();
        let diag: f64 = (0..n).map(|i| a[i * n + i].powi(2)).sum();
        if off <= 1e-32 * diag || off == 0.0 {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                let apq = a[p * n + q];
                if apq == 0.0 {
                    continue;
                }
                let theta = (a[q * n + q] - a[p * n + p]) / (2.0 * apq);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let t = if theta == 0.0 { 1.0 } else { t };
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..n {
                    let (akp, akq) = (a[k * n + p], a[k * n + q]);
                    a[k * n + p] = c * akp - s * akq;
                    a[k * n + q] = s * akp + c * akq;
                }
                for k in 0..n {
                    let (apk, aqk) = (a[p * n + k], a[q * n + k]);
                    a[p * n + k] = c * apk - s * aqk;
                    a[q * n + k] = s * apk + c * aqk;
                }
                for k in 0..n {
                    let (vkp, vkq) = (v[k * n + p], v[k * n + q]);
                    v[k * n + p] = c * vkp - s * vkq;
                    v[k * n + q] = s * vkp + c * vkq;
                }
            }
        }
    }
    ((0..n).map(|i| a[i * n + i]).collect(), v)
}

/// Diagnostics from the weighted Jacobian `jac` (`m x p`, row-major), the
/// sum of squared weighted residuals `ssr` and the number of data residuals
/// `dof_m` (regularisation rows are not data).
pub fn covariance(jac: &[f64], m: usize, p: usize, ssr: f64, dof_m: usize) -> Covariance {
    let mut jtj = vec![0.0; p * p];
    for i in 0..m {
        for a in 0..p {
            for b in 0..p {
                jtj[a * p + b] += jac[i * p + a] * jac[i * p + b];
            }
        }
    }
    let none = Covariance {
        se: vec![None; p],
        corr: vec![vec![None; p]; p],
        condition_number: None,
    };
    if p == 0 {
        return none;
    }
    let scale: Vec<f64> = (0..p).map(|a| jtj[a * p + a].sqrt()).collect();
    let mut scaled = jtj.clone();
    for a in 0..p {
        for b in 0..p {
            let s = scale[a] * scale[b];
            scaled[a * p + b] = if s > 0.0 { jtj[a * p + b] / s } else { 0.0 };
        }
    }
    let (eig, v) = symmetric_eigen(&scaled, p);
    let max = eig.iter().cloned().fold(0.0_f64, f64::max);
    let min = eig.iter().cloned().fold(f64::INFINITY, f64::min);
    let singular: Vec<usize> = (0..p)
        .filter(|&k| eig[k].is_nan() || eig[k] <= SINGULAR_REL * max || scale.contains(&0.0))
        .collect();
    let condition_number = if singular.is_empty() && min > 0.0 {
        Some(max / min)
    } else {
        None
    };
    // A parameter touched by a null direction has no standard error.
    let unidentified: Vec<bool> = (0..p)
        .map(|a| scale[a] == 0.0 || singular.iter().any(|&k| v[a * p + k].abs() > 1e-3))
        .collect();
    let s2 = if dof_m > p {
        ssr / (dof_m - p) as f64
    } else {
        f64::NAN
    };
    let mut cov = vec![0.0; p * p];
    for a in 0..p {
        for b in 0..p {
            let mut c = 0.0;
            for k in 0..p {
                if !singular.contains(&k) {
                    c += v[a * p + k] * v[b * p + k] / eig[k];
                }
            }
            let s = scale[a] * scale[b];
            cov[a * p + b] = if s > 0.0 { s2 * c / s } else { f64::NAN };
        }
    }
    let se: Vec<Option<f64>> = (0..p)
        .map(|a| {
            let var = cov[a * p + a];
            (!unidentified[a] && var.is_finite() && var >= 0.0).then(|| var.sqrt())
        })
        .collect();
    let corr = (0..p)
        .map(|a| {
            (0..p)
                .map(|b| match (se[a], se[b]) {
                    (Some(sa), Some(sb)) if sa > 0.0 && sb > 0.0 => {
                        Some((cov[a * p + b] / (sa * sb)).clamp(-1.0, 1.0))
                    }
                    (Some(_), Some(_)) if a == b => Some(1.0),
                    _ => None,
                })
                .collect()
        })
        .collect();
    if s2.is_nan() {
        return Covariance {
            condition_number,
            ..none
        };
    }
    Covariance {
        se,
        corr,
        condition_number,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn straight_line_standard_errors() {
        // y = a + b t at t = 0, 1, 2, 3 with residuals (0.1, -0.1, -0.1, 0.1):
        // textbook OLS, s^2 = 0.04 / 2, (X^T X)^{-1} = [[0.7, -0.3], [-0.3, 0.2]].
        let jac = [1.0, 0.0, 1.0, 1.0, 1.0, 2.0, 1.0, 3.0];
        let c = covariance(&jac, 4, 2, 0.04, 4);
        let se_a = (0.02_f64 * 0.7).sqrt();
        let se_b = (0.02_f64 * 0.2).sqrt();
        assert!((c.se[0].unwrap() - se_a).abs() < 1e-14);
        assert!((c.se[1].unwrap() - se_b).abs() < 1e-14);
        let r = -0.3 / (0.7_f64 * 0.2).sqrt();
        assert!((c.corr[0][1].unwrap() - r).abs() < 1e-13);
    }

    #[test]
    fn a_repeated_column_is_not_identified() {
        let jac = [1.0, 1.0, 2.0, 2.0, 3.0, 3.0];
        let c = covariance(&jac, 3, 2, 1.0, 3);
        assert_eq!(c.se, vec![None, None]);
        assert_eq!(c.condition_number, None);
    }
}
