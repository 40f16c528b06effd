//! Small numerical tools for maximum likelihood in two or three dimensions: a Nelder-Mead simplex
//! search and a central-difference Hessian.
//!
//! The likelihoods here have at most three parameters and are cheap after their per-node tables are
//! built, so a derivative-free search that cannot be misled by the quadrature's tiny ripples is the
//! robust choice; the observed information then comes from finite differences at the optimum.

/// Minimises `f` from `start` with the Nelder-Mead simplex (standard coefficients 1, 2, 0.5, 0.5),
/// restarting `restarts` times from the point found so that a collapsed simplex cannot stop it early. Stops when
/// the simplex spans less than `x_tol` in every coordinate and its values less than `f_tol`, or after
/// `max_evaluations`. Non-finite values count as +inf, so `f` may refuse points by returning NaN.
pub fn nelder_mead(
    f: &mut impl FnMut(&[f64]) -> f64,
    start: &[f64],
    step: f64,
    x_tol: f64,
    f_tol: f64,
    max_evaluations: usize,
    restarts: usize,
) -> (Vec<f64>, f64) {
    let mut best = start.to_vec();
    let mut value = f64::INFINITY;
    let mut budget = max_evaluations;
    for round in 0..=restarts {
        let scale = if round == 0 { step } else { step * 0.1 };
        let (x, v, used) = simplex(f, &best, scale, x_tol, f_tol, budget);
        budget = budget.saturating_sub(used);
        if v <= value {
            best = x;
            value = v;
        }
    }
    (best, value)
}

fn clean(v: f64) -> f64 {
    if v.is_nan() { f64::INFINITY } else { v }
}

fn simplex(
    f: &mut impl FnMut(&[f64]) -> f64,
    start: &[f64],
    step: f64,
    x_tol: f64,
    f_tol: f64,
    budget: usize,
) -> (Vec<f64>, f64, usize) {
    let n = start.len();
    let mut points: Vec<Vec<f64>> = vec![start.to_vec()];
    for i in 0..n {
        let mut p = start.to_vec();
        p[i] += step;
        points.push(p);
    }
    let mut values: Vec<f64> = points.iter().map(|p| clean(f(p))).collect();
    let mut used = n + 1;
    while used < budget {
        let mut order: Vec<usize> = (0..=n).collect();
        order.sort_by(|&a, &b| values[a].total_cmp(&values[b]));
        points = order.iter().map(|&i| points[i].clone()).collect();
        values = order.iter().map(|&i| values[i]).collect();
        let spread = (0..n)
            .map(|d| points.iter().map(|p| (p[d] - points[0][d]).abs()).fold(0.0, f64::max))
            .fold(0.0, f64::max);
        let value_spread = values[n] - values[0];
        if spread <= x_tol && (value_spread <= f_tol || !value_spread.is_finite() && spread == 0.0) {
            break;
        }
        let centroid: Vec<f64> = (0..n)
            .map(|d| points[..n].iter().map(|p| p[d]).sum::<f64>() / n as f64)
            .collect();
        let toward = |t: f64| -> Vec<f64> { (0..n).map(|d| centroid[d] + t * (points[n][d] - centroid[d])).collect() };
        let reflected = toward(-1.0);
        let fr = clean(f(&reflected));
        used += 1;
        if fr < values[0] {
            let expanded = toward(-2.0);
            let fe = clean(f(&expanded));
            used += 1;
            if fe < fr {
                points[n] = expanded;
                values[n] = fe;
            } else {
                points[n] = reflected;
                values[n] = fr;
            }
        } else if fr < values[n - 1] {
            points[n] = reflected;
            values[n] = fr;
        } else {
            let (contracted, fc) = if fr < values[n] {
                let c = toward(-0.5);
                let v = clean(f(&c));
                (c, v)
            } else {
                let c = toward(0.5);
                let v = clean(f(&c));
                (c, v)
            };
            used += 1;
            if fc < values[n].min(fr) {
                points[n] = contracted;
                values[n] = fc;
            } else {
                let best = points[0].clone();
                for (point, value) in points.iter_mut().zip(values.iter_mut()).skip(1) {
                    for (p, b) in point.iter_mut().zip(&best) {
                        *p = b + 0.5 * (*p - b);
                    }
                    *value = clean(f(point));
                }
                used += n;
            }
        }
    }
    let best = (0..=n).min_by(|&a, &b| values[a].total_cmp(&values[b])).unwrap_or(0);
    (points[best].clone(), values[best], used)
}

/// Central-difference Hessian of `f` at `x` with steps `h` (one per coordinate). `None` when any
/// evaluation is not finite.
pub fn hessian(f: &mut impl FnMut(&[f64]) -> f64, x: &[f64], h: &[f64]) -> Option<Vec<Vec<f64>>> {
    let n = x.len();
    let mut at = |dx: &[(usize, f64)]| -> f64 {
        let mut p = x.to_vec();
        for &(i, d) in dx {
            p[i] += d;
        }
        f(&p)
    };
    let f0 = at(&[]);
    let mut out = vec![vec![0.0; n]; n];
    for i in 0..n {
        let fp = at(&[(i, h[i])]);
        let fm = at(&[(i, -h[i])]);
        out[i][i] = (fp - 2.0 * f0 + fm) / (h[i] * h[i]);
        for j in 0..i {
            let v = (at(&[(i, h[i]), (j, h[j])]) - at(&[(i, h[i]), (j, -h[j])]) - at(&[(i, -h[i]), (j, h[j])])
                + at(&[(i, -h[i]), (j, -h[j])]))
                / (4.0 * h[i] * h[j]);
            out[i][j] = v;
            out[j][i] = v;
        }
    }
    out.iter().flatten().all(|v| v.is_finite()).then_some(out)
}

/// Inverse of a small symmetric positive-definite matrix by Cholesky; `None` when it is not positive
/// definite (the likelihood is flat or curved the wrong way in some direction).
pub fn inverse_positive_definite(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let mut l = vec![vec![0.0; n]; n];
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = a[i][j] - (0..j).map(|k| l[i][k] * l[j][k]).sum::<f64>();
            if i == j {
                if s.is_nan() || s <= 0.0 || !s.is_finite() {
                    return None;
                }
                l[i][i] = s.sqrt();
            } else {
                l[i][j] = s / l[j][j];
            }
        }
    }
    // Solve L L^T X = I column by column.
    let mut inv = vec![vec![0.0; n]; n];
    #[allow(clippy::needless_range_loop)]
    for c in 0..n {
        let mut y = vec![0.0; n];
        for i in 0..n {
            let rhs = if i == c { 1.0 } else { 0.0 };
            y[i] = (rhs - (0..i).map(|k| l[i][k] * y[k]).sum::<f64>()) / l[i][i];
        }
        let mut x = vec![0.0; n];
        for i in (0..n).rev() {
            x[i] = (y[i] - (i + 1..n).map(|k| l[k][i] * x[k]).sum::<f64>()) / l[i][i];
        }
        for (row, v) in inv.iter_mut().zip(&x) {
            row[c] = *v;
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nelder_mead_finds_the_rosenbrock_minimum() {
        // Rosenbrock's function has its minimum 0 at (1, 1) (textbook test function).
        let mut f = |x: &[f64]| (1.0 - x[0]).powi(2) + 100.0 * (x[1] - x[0] * x[0]).powi(2);
        let (x, v) = nelder_mead(&mut f, &[-1.2, 1.0], 0.5, 1e-10, 1e-14, 20_000, 1);
        assert!((x[0] - 1.0).abs() < 1e-6 && (x[1] - 1.0).abs() < 1e-6, "{x:?}");
        assert!(v < 1e-12);
    }

    #[test]
    fn hessian_and_inverse_of_a_quadratic() {
        // f = x^2 + x y + 2 y^2 has Hessian [[2, 1], [1, 4]], whose inverse is [[4, -1], [-1, 2]] / 7.
        let mut f = |x: &[f64]| x[0] * x[0] + x[0] * x[1] + 2.0 * x[1] * x[1];
        let h = hessian(&mut f, &[0.3, -0.2], &[1e-3, 1e-3]).unwrap();
        let inv = inverse_positive_definite(&h).unwrap();
        assert!((inv[0][0] - 4.0 / 7.0).abs() < 1e-8 && (inv[0][1] + 1.0 / 7.0).abs() < 1e-8);
        assert!(inverse_positive_definite(&[vec![1.0, 2.0], vec![2.0, 1.0]]).is_none());
    }
}
