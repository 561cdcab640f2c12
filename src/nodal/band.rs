//! Band matrices for networks whose unknowns each couple only to a few neighbours (a
//! chain of stages numbered along the signal path), and the ordering that makes them so.
//!
//! - [`Band`]: a square matrix whose entries lie within `kl` diagonals below and `ku`
//!   above the main one, stored row by row with room for the `kl` further diagonals
//!   that row swaps bring above it, and Gaussian elimination with partial pivoting in
//!   that storage (as LAPACK's `gbtrf`, from memory: the lower band stays `kl`, the
//!   upper grows to `ku + kl`). The right-hand side is eliminated with the matrix, so
//!   the multipliers are not kept. Cost n·kl·(kl + ku) instead of n³/3; storage
//!   n·(2·kl + ku + 1) instead of n². When that storage is no smaller than n², the
//!   same elimination runs in dense storage ([`Band::dense`]); the tests check it
//!   against the plain dense solve [`super::solve_in_place`].
//! - [`band_ordering`]: reverse Cuthill–McKee (Cuthill and McKee 1969; reversed,
//!   George 1971; the start at a pseudo-peripheral node, George and Liu 1979; all from
//!   memory): unknowns numbered breadth first from one end of the graph, so each
//!   couples only to unknowns of its own and the neighbouring levels. On a chain of
//!   stages the levels run along the signal path, and the band is a few stages wide
//!   whatever the chain's length.

use super::{pivot_row, stamp_at, Scalar};

/// The shape and storage of an `n × n` band matrix: entry (i, j), for i − kl ≤ j ≤
/// i + ku + kl, lives at `i·stride + j + shift` of the caller's slice.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Band {
    n: usize,
    /// kl: rows below a pivot that may hold an entry in its column.
    lower: usize,
    /// ku + kl (at most n − 1): columns right of the diagonal that may hold an entry
    /// once rows have been swapped.
    upper: usize,
    stride: usize,
    shift: usize,
}

impl Band {
    /// Every entry of an `n × n` matrix, row-major (`i·n + j`).
    pub fn dense(n: usize) -> Band {
        let last = n.saturating_sub(1);
        Band {
            n,
            lower: last,
            upper: last,
            stride: n,
            shift: 0,
        }
    }

    /// An `n × n` matrix with `kl` sub- and `ku` super-diagonals; in dense storage
    /// when the band's (2·kl + ku + 1 per row) would be no smaller.
    pub fn new(n: usize, kl: usize, ku: usize) -> Band {
        let last = n.saturating_sub(1);
        let lower = kl.min(last);
        let upper = (lower + ku).min(last);
        // Row i holds columns i − kl ..= i + upper: kl + 1 + upper entries.
        let width = lower + 1 + upper;
        if width >= n {
            return Band {
                lower,
                upper,
                ..Band::dense(n)
            };
        }
        // i·width + (j − i + kl) = i·(width − 1) + j + kl.
        Band {
            n,
            lower,
            upper,
            stride: width - 1,
            shift: lower,
        }
    }

    /// The narrowest band holding every `(row, column)` of `entries` (and the diagonal).
    pub fn enclosing(n: usize, entries: impl IntoIterator<Item = (usize, usize)>) -> Band {
        let (mut kl, mut ku) = (0, 0);
        for (i, j) in entries {
            kl = kl.max(i.saturating_sub(j));
            ku = ku.max(j.saturating_sub(i));
        }
        Band::new(n, kl, ku)
    }

    /// The matrix's order n.
    pub fn order(&self) -> usize {
        self.n
    }

    /// Sub-diagonals kl.
    pub fn lower(&self) -> usize {
        self.lower
    }

    /// Super-diagonals stored, ku + kl (at most n − 1).
    pub fn upper(&self) -> usize {
        self.upper
    }

    /// Entries the caller's slice must hold.
    pub fn len(&self) -> usize {
        match self.n {
            0 => 0,
            n => self.at(n - 1, n - 1) + 1,
        }
    }

    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    /// Where entry (i, j) lives; (i, j) must lie in the band.
    #[inline]
    pub fn at(&self, i: usize, j: usize) -> usize {
        debug_assert!(j + self.lower >= i && j <= i + self.upper && i.max(j) < self.n);
        i * self.stride + j + self.shift
    }

    /// [`super::stamp_between`] in this storage.
    #[inline]
    pub fn stamp_between<T: Scalar>(&self, a: &mut [T], p: Option<usize>, q: Option<usize>, g: T) {
        stamp_at(a, |i, j| self.at(i, j), p, q, g);
    }

    /// Solve `a·x = rhs` by Gaussian elimination with partial pivoting (the pivot
    /// among the kl rows below, the row swap over the ku + kl columns right); the
    /// solution replaces `rhs` and `a` is overwritten. `None` when `a` is singular or
    /// the solution is not finite. Cost n·kl·(kl + ku).
    pub fn solve_in_place<T: Scalar>(&self, a: &mut [T], rhs: &mut [T]) -> Option<()> {
        self.eliminate(a, Eliminated::Rhs(rhs))?;
        self.back_substitute(a, rhs)
    }

    /// Factor `a` in place for several right-hand sides ([`Band::solve_factored`]):
    /// the same elimination as [`Band::solve_in_place`], each multiplier kept where it
    /// eliminated an entry and each step's pivot row in `pivots` (length n), as
    /// LAPACK's `gbtrf` does (from memory). `None` when `a` is singular.
    pub fn factor_in_place<T: Scalar>(&self, a: &mut [T], pivots: &mut [usize]) -> Option<()> {
        self.eliminate(a, Eliminated::Kept(pivots))
    }

    /// Solve `a·x = rhs` with `a` factored by [`Band::factor_in_place`]: the row swaps
    /// and multipliers replayed on `rhs` in their order, then back substitution. Cost
    /// n·(2·kl + ku) per right-hand side.
    pub fn solve_factored<T: Scalar>(
        &self,
        a: &[T],
        pivots: &[usize],
        rhs: &mut [T],
    ) -> Option<()> {
        let n = self.n;
        for col in 0..n {
            rhs.swap(col, pivots[col]);
            let r = rhs[col];
            for row in col + 1..=(col + self.lower).min(n.saturating_sub(1)) {
                let f = a[self.at(row, col)];
                rhs[row] -= f * r;
            }
        }
        self.back_substitute(a, rhs)
    }

    /// Forward elimination with partial pivoting; the right-hand side eliminated with
    /// the matrix, or the multipliers and pivots kept for later ones.
    fn eliminate<T: Scalar>(&self, a: &mut [T], mut with: Eliminated<T>) -> Option<()> {
        let n = self.n;
        let at = |i: usize, j: usize| self.at(i, j);
        for col in 0..n {
            let last_row = (col + self.lower).min(n - 1);
            let last_col = (col + self.upper).min(n - 1);
            let pivot = pivot_row(a, at, col, col + 1..last_row + 1)?;
            if pivot != col {
                // Columns left of `col` hold spent entries (or kept multipliers), never
                // swapped again.
                for k in col..=last_col {
                    a.swap(at(col, k), at(pivot, k));
                }
            }
            match &mut with {
                Eliminated::Rhs(rhs) => rhs.swap(col, pivot),
                Eliminated::Kept(pivots) => pivots[col] = pivot,
            }
            let inv = T::ONE / a[at(col, col)];
            for row in col + 1..=last_row {
                let f = a[at(row, col)] * inv;
                if let Eliminated::Kept(_) = with {
                    a[at(row, col)] = f;
                }
                if f == T::ZERO {
                    continue;
                }
                for k in col + 1..=last_col {
                    let v = a[at(col, k)];
                    a[at(row, k)] -= f * v;
                }
                if let Eliminated::Rhs(rhs) = &mut with {
                    let r = rhs[col];
                    rhs[row] -= f * r;
                }
            }
        }
        Some(())
    }

    /// Back substitution on the upper triangle the elimination left.
    fn back_substitute<T: Scalar>(&self, a: &[T], rhs: &mut [T]) -> Option<()> {
        let n = self.n;
        for row in (0..n).rev() {
            let mut acc = rhs[row];
            for k in row + 1..=(row + self.upper).min(n - 1) {
                acc -= a[self.at(row, k)] * rhs[k];
            }
            rhs[row] = acc / a[self.at(row, row)];
        }
        rhs.iter().all(|x| x.is_finite()).then_some(())
    }
}

/// What the elimination carries along: one right-hand side, or the pivots (the
/// multipliers then stay in the matrix).
enum Eliminated<'a, T> {
    Rhs(&'a mut [T]),
    Kept(&'a mut [usize]),
}

/// A numbering of `n` unknowns for band storage: `order[k]` is the unknown numbered k
/// ([`band_ordering`]), `number[u]` the number of unknown u, and `band` the narrowest
/// band holding every coupling of `edges`, in both orders, in that numbering.
#[derive(Debug, Clone, PartialEq)]
pub struct Numbering {
    pub order: Vec<usize>,
    pub number: Vec<usize>,
    pub band: Band,
}

impl Numbering {
    /// The reverse Cuthill–McKee numbering of `n` unknowns coupled by `edges`.
    pub fn of(n: usize, edges: &[(usize, usize)]) -> Numbering {
        let order = band_ordering(n, edges);
        let mut number = vec![0; n];
        for (k, &u) in order.iter().enumerate() {
            number[u] = k;
        }
        let band = Band::enclosing(
            n,
            edges
                .iter()
                .flat_map(|&(p, q)| [(number[p], number[q]), (number[q], number[p])]),
        );
        Numbering {
            order,
            number,
            band,
        }
    }
}

/// Reverse Cuthill–McKee order of the graph on `n` vertices with `edges`: `order[k]`
/// is the vertex numbered k. Each connected part in turn (by its lowest vertex), from
/// a pseudo-peripheral vertex, breadth first, neighbours by rising degree; the whole
/// numbering reversed. Cost O(n + edges) per breadth-first pass, a few passes.
pub fn band_ordering(n: usize, edges: &[(usize, usize)]) -> Vec<usize> {
    // Adjacency in compressed rows: the neighbours of v are adj[first[v]..first[v + 1]].
    let mut first = vec![0usize; n + 1];
    for &(a, b) in edges.iter().filter(|(a, b)| a != b) {
        first[a + 1] += 1;
        first[b + 1] += 1;
    }
    for v in 0..n {
        first[v + 1] += first[v];
    }
    let mut fill = first.clone();
    let mut adj = vec![0usize; first[n]];
    for &(a, b) in edges.iter().filter(|(a, b)| a != b) {
        adj[fill[a]] = b;
        fill[a] += 1;
        adj[fill[b]] = a;
        fill[b] += 1;
    }
    let degree = |v: usize| first[v + 1] - first[v];
    for v in 0..n {
        adj[first[v]..first[v + 1]].sort_by_key(|&w| (degree(w), w));
    }
    let neighbours = |v: usize| &adj[first[v]..first[v + 1]];

    // Breadth first from `root` over vertices not yet numbered, appended to `out`;
    // returns where its last level starts. `seen[v] == pass` marks this pass.
    let mut seen = vec![0usize; n];
    let mut pass = 0;
    let mut bfs = |root: usize, out: &mut Vec<usize>, numbered: &[bool]| -> (usize, usize) {
        pass += 1;
        let start = out.len();
        seen[root] = pass;
        out.push(root);
        let (mut level, mut next, mut depth) = (start, start, 0);
        let mut head = start;
        while head < out.len() {
            if head == next {
                // A new level begins.
                level = next;
                next = out.len();
                depth += 1;
            }
            let v = out[head];
            head += 1;
            for &w in neighbours(v) {
                if seen[w] != pass && !numbered[w] {
                    seen[w] = pass;
                    out.push(w);
                }
            }
        }
        (level, depth)
    };

    let mut numbered = vec![false; n];
    let mut order = Vec::with_capacity(n);
    let mut scratch = Vec::with_capacity(n);
    for seed in 0..n {
        if numbered[seed] {
            continue;
        }
        // Pseudo-peripheral root: move to a least-degree vertex of the last level
        // while that deepens the level structure.
        let mut root = seed;
        scratch.clear();
        let (mut last, mut depth) = bfs(root, &mut scratch, &numbered);
        loop {
            let far = scratch[last..]
                .iter()
                .copied()
                .min_by_key(|&v| (degree(v), v))
                .expect("a last level is never empty");
            scratch.clear();
            let (l, d) = bfs(far, &mut scratch, &numbered);
            if d <= depth {
                break;
            }
            (root, last, depth) = (far, l, d);
        }
        let from = order.len();
        bfs(root, &mut order, &numbered);
        for &v in &order[from..] {
            numbered[v] = true;
        }
    }
    order.reverse();
    order
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::nodal::solve_in_place;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A random n × n matrix with `kl` sub- and `ku` super-diagonals (entries in
    /// ±1, some zero so that pivoting swaps rows), dense row-major, and a right-hand side.
    fn random_banded(rng: &mut ChaCha8Rng, n: usize, kl: usize, ku: usize) -> Vec<f64> {
        let mut a = vec![0.0; n * n];
        for i in 0..n {
            for j in i.saturating_sub(kl)..(i + ku + 1).min(n) {
                if rng.random_bool(0.8) {
                    a[i * n + j] = rng.random_range(-1.0..1.0);
                }
            }
        }
        a
    }

    #[test]
    fn band_solve_equals_dense_lu_on_random_band_systems() {
        // Reference: the same linear system solved by dense LU with partial pivoting
        // (`solve_in_place`, itself checked against nalgebra in tests/). Both choose the
        // same pivots and do the same arithmetic on the nonzero entries, so they agree
        // exactly up to rounding; the check allows 1e-12 relative to the solution.
        let mut rng = ChaCha8Rng::seed_from_u64(15);
        let mut cases = 0;
        for _ in 0..300 {
            let n = rng.random_range(1..40);
            let kl = rng.random_range(0..6);
            let ku = rng.random_range(0..6);
            let dense = random_banded(&mut rng, n, kl, ku);
            let b: Vec<f64> = (0..n).map(|_| rng.random_range(-1.0..1.0)).collect();
            let (mut a, mut x_dense) = (dense.clone(), b.clone());
            let Some(()) = solve_in_place(&mut a, n, &mut x_dense) else {
                continue;
            };
            let band = Band::new(n, kl, ku);
            let mut stored = vec![0.0; band.len()];
            for i in 0..n {
                for j in i.saturating_sub(kl)..(i + ku + 1).min(n) {
                    stored[band.at(i, j)] = dense[i * n + j];
                }
            }
            let mut x = b.clone();
            band.solve_in_place(&mut stored, &mut x)
                .unwrap_or_else(|| panic!("n {n}, kl {kl}, ku {ku}: dense solved it"));
            let scale = x_dense.iter().fold(1.0f64, |m, v| m.max(v.abs()));
            for (p, q) in x.iter().zip(&x_dense) {
                assert!(
                    (p - q).abs() <= 1e-12 * scale,
                    "n {n} kl {kl} ku {ku}: {p} vs {q}"
                );
            }
            cases += 1;
        }
        // Upper triangular draws (kl = 0) with a zero on the diagonal are singular.
        assert!(cases > 150, "{cases} solvable systems");
    }

    #[test]
    fn factored_solves_equal_the_one_shot_solve() {
        // The kept multipliers and pivots replayed on several right-hand sides give
        // what the one-shot elimination gives on each (same operations, same order:
        // equal to the last bit), on random band systems.
        let mut rng = ChaCha8Rng::seed_from_u64(19);
        for _ in 0..200 {
            let n = rng.random_range(1..30);
            let (kl, ku) = (rng.random_range(0..5), rng.random_range(0..5));
            let dense = random_banded(&mut rng, n, kl, ku);
            let band = Band::new(n, kl, ku);
            let mut stored = vec![0.0; band.len()];
            for i in 0..n {
                for j in i.saturating_sub(kl)..(i + ku + 1).min(n) {
                    stored[band.at(i, j)] = dense[i * n + j];
                }
            }
            let mut factored = stored.clone();
            let mut pivots = vec![0; n];
            if band.factor_in_place(&mut factored, &mut pivots).is_none() {
                continue;
            }
            for _ in 0..3 {
                let b: Vec<f64> = (0..n).map(|_| rng.random_range(-1.0..1.0)).collect();
                let (mut once, mut x) = (b.clone(), b.clone());
                band.solve_in_place(&mut stored.clone(), &mut once).unwrap();
                band.solve_factored(&factored, &pivots, &mut x).unwrap();
                assert_eq!(x, once, "n {n} kl {kl} ku {ku}");
            }
        }
    }

    #[test]
    fn a_narrow_band_is_stored_in_band_storage() {
        // 100 × 100 tridiagonal: rows of 2·1 + 1 + 1 entries, the last row's two
        // beyond the matrix not stored: 100·4 − 2, not 10 000.
        let band = Band::new(100, 1, 1);
        assert_eq!(band.len(), 100 * 4 - 2);
        // A band as wide as the matrix is stored densely.
        assert_eq!(Band::new(5, 3, 3).len(), 25);
    }

    #[test]
    fn a_singular_band_system_is_refused() {
        // Rows 1 and 2 of a tridiagonal matrix equal: singular.
        let band = Band::new(4, 1, 1);
        let mut a = vec![0.0; band.len()];
        for (i, j, v) in [
            (0, 0, 2.0),
            (0, 1, 1.0),
            (1, 0, 0.0),
            (1, 1, 1.0),
            (1, 2, 1.0),
            (2, 1, 1.0),
            (2, 2, 1.0),
            (2, 3, 0.0),
            (3, 2, 1.0),
            (3, 3, 1.0),
        ] {
            a[band.at(i, j)] = v;
        }
        assert!(band.solve_in_place(&mut a, &mut [1.0; 4]).is_none());
    }

    #[test]
    fn ordering_a_shuffled_path_gives_a_band_of_one() {
        // A path graph numbered at random: reverse Cuthill–McKee numbers it end to end,
        // so every edge joins consecutive numbers (bandwidth 1, the least possible).
        let mut rng = ChaCha8Rng::seed_from_u64(1969);
        let n = 200;
        let mut label: Vec<usize> = (0..n).collect();
        for i in (1..n).rev() {
            label.swap(i, rng.random_range(0..=i));
        }
        let edges: Vec<(usize, usize)> = (1..n).map(|k| (label[k - 1], label[k])).collect();
        let order = band_ordering(n, &edges);
        let mut number = vec![0; n];
        for (k, &v) in order.iter().enumerate() {
            number[v] = k;
        }
        let mut sorted = order.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, (0..n).collect::<Vec<_>>(), "a permutation");
        for &(a, b) in &edges {
            assert_eq!(number[a].abs_diff(number[b]), 1);
        }
    }

    #[test]
    fn ordering_covers_separate_parts_and_ladders() {
        // Two ladders (2 × 50 grids) with no edge between them: each numbered apart,
        // every edge within 2 numbers (a ladder's least bandwidth is 2).
        let rungs = 50;
        let mut edges = Vec::new();
        for part in 0..2 {
            let v = |side: usize, k: usize| part * 2 * rungs + side * rungs + k;
            for k in 0..rungs {
                edges.push((v(0, k), v(1, k)));
                if k + 1 < rungs {
                    edges.push((v(0, k), v(0, k + 1)));
                    edges.push((v(1, k), v(1, k + 1)));
                }
            }
        }
        let n = 4 * rungs;
        let order = band_ordering(n, &edges);
        let mut number = vec![usize::MAX; n];
        for (k, &v) in order.iter().enumerate() {
            number[v] = k;
        }
        assert!(number.iter().all(|&k| k < n));
        let band = edges
            .iter()
            .map(|&(a, b)| number[a].abs_diff(number[b]))
            .max();
        assert_eq!(band, Some(2));
    }
}
