//! The monomials of a polynomial: every product of the inputs up to a total degree, in one
//! fixed order, evaluated each from a lower one.

/// Number of monomials of total degree at most `degree` in `inputs` variables, the constant
/// included: C(inputs + degree, degree).
pub fn monomial_count(inputs: usize, degree: usize) -> usize {
    // Product form, exact in integers: C(n + k, k) = Π_{i=1..k} (n + i) / i.
    let mut c: usize = 1;
    for i in 1..=degree {
        c = c.saturating_mul(inputs + i) / i;
    }
    c
}

/// All monomials of total degree ≤ `degree` in d variables z_0 … z_{d−1}.
///
/// Fixed order: by total degree (the constant first, then z_0 … z_{d−1}, then the quadratics, …),
/// and within one degree by the nondecreasing variable-index tuples (i_1 ≤ … ≤ i_k) in
/// lexicographic order. For d = 2, degree 2: [1, z0, z1, z0², z0·z1, z1²]. Each monomial of
/// degree k is its degree-(k−1) prefix times its last variable, which is how they are evaluated.
#[derive(Debug, Clone, PartialEq)]
pub struct MonomialMap {
    inputs: usize,
    degree: usize,
    /// For monomial i ≥ 1: index of the monomial it extends (0 for the linear terms).
    parent: Vec<usize>,
    /// For monomial i ≥ 1: the variable that multiplies the parent.
    var: Vec<usize>,
}

impl MonomialMap {
    /// The map for `inputs` variables up to total degree `degree`.
    pub fn new(inputs: usize, degree: usize) -> Self {
        let mut parent = vec![usize::MAX];
        let mut var = vec![usize::MAX];
        // Monomials of the previous degree: [start, end) and each one's last variable.
        let mut last = vec![0usize];
        let (mut start, mut end) = (0, 1);
        for k in 1..=degree {
            let mut next_last = Vec::new();
            for (offset, m) in (start..end).enumerate() {
                let from = if k == 1 { 0 } else { last[offset] };
                for v in from..inputs {
                    parent.push(m);
                    var.push(v);
                    next_last.push(v);
                }
            }
            start = end;
            end = parent.len();
            last = next_last;
        }
        debug_assert_eq!(parent.len(), monomial_count(inputs, degree));
        MonomialMap {
            inputs,
            degree,
            parent,
            var,
        }
    }

    /// Number of variables.
    pub fn inputs(&self) -> usize {
        self.inputs
    }

    /// Highest total degree.
    pub fn degree(&self) -> usize {
        self.degree
    }

    /// Number of monomials, the constant included.
    pub fn len(&self) -> usize {
        self.parent.len()
    }

    /// Never true: the constant is always there.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Exponent of each variable in monomial `i` (`inputs` entries).
    pub fn exponents(&self, mut i: usize) -> Vec<usize> {
        let mut e = vec![0; self.inputs];
        while i != 0 {
            e[self.var[i]] += 1;
            i = self.parent[i];
        }
        e
    }

    /// Writes every monomial of `z` (length `inputs`) into `out` (length [`MonomialMap::len`]).
    #[inline]
    pub fn write(&self, z: &[f64], out: &mut [f64]) {
        out[0] = 1.0;
        for i in 1..out.len() {
            out[i] = out[self.parent[i]] * z[self.var[i]];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn monomial_map_order_count_and_values() {
        assert_eq!(monomial_count(2, 2), 6);
        assert_eq!(monomial_count(8, 3), 165);
        assert_eq!(monomial_count(1, 5), 6);
        let map = MonomialMap::new(2, 2);
        let order: Vec<Vec<usize>> = (0..map.len()).map(|i| map.exponents(i)).collect();
        assert_eq!(
            order,
            vec![
                vec![0, 0],
                vec![1, 0],
                vec![0, 1],
                vec![2, 0],
                vec![1, 1],
                vec![0, 2]
            ]
        );
        let mut out = vec![0.0; 6];
        map.write(&[3.0, -2.0], &mut out);
        assert_eq!(out, vec![1.0, 3.0, -2.0, 9.0, -6.0, 4.0]);
        // Every exponent vector of total degree ≤ 4 in 3 variables appears exactly once, in
        // nondecreasing total degree, and each value is the product it names.
        let map = MonomialMap::new(3, 4);
        assert_eq!(map.len(), monomial_count(3, 4));
        let mut seen = std::collections::BTreeSet::new();
        let z = [1.5, -0.7, 2.1];
        let mut out = vec![0.0; map.len()];
        map.write(&z, &mut out);
        let mut last_degree = 0;
        for (i, v) in out.iter().enumerate() {
            let e = map.exponents(i);
            let degree: usize = e.iter().sum();
            assert!(degree >= last_degree && degree <= 4);
            last_degree = degree;
            assert!(seen.insert(e.clone()), "{e:?} twice");
            let direct: f64 = e.iter().zip(&z).map(|(&k, x)| x.powi(k as i32)).product();
            assert!((v - direct).abs() <= 1e-14 * direct.abs().max(1.0));
        }
        assert_eq!(seen.len(), 35);
    }
}
