//! Node merging: a wire (a 0 Ω resistor, a shorted capacitor, a direct link) joins two
//! nodes into one unknown instead of standing in as a huge conductance. Union–find
//! over a fixed set of nodes, then one number per merged node that is not held fixed.

/// Largest number of nodes a [`Merge`] on the stack holds (a stage's sub-circuit).
pub const MAX_NODES: usize = 16;

/// Union–find over nodes `0..n`; nodes `0..fixed` are held at known voltages (ground,
/// rails) and are never unknowns.
#[derive(Debug, Clone, Copy)]
pub struct Merge {
    parent: [u8; MAX_NODES],
    n: usize,
    fixed: usize,
}

impl Merge {
    /// `n` nodes, the first `fixed` of them held at known voltages.
    pub fn new(n: usize, fixed: usize) -> Merge {
        assert!(
            n <= MAX_NODES,
            "a sub-circuit has at most {MAX_NODES} nodes"
        );
        let mut parent = [0u8; MAX_NODES];
        for (i, p) in parent.iter_mut().enumerate() {
            *p = i as u8;
        }
        Merge { parent, n, fixed }
    }

    pub fn root(&self, mut x: usize) -> usize {
        while self.parent[x] as usize != x {
            x = self.parent[x] as usize;
        }
        x
    }

    /// Join `a` and `b`. The root is the smaller index, so a fixed node stays the root
    /// of whatever it is joined to.
    pub fn join(&mut self, a: usize, b: usize) {
        let (ra, rb) = (self.root(a), self.root(b));
        let (lo, hi) = if ra < rb { (ra, rb) } else { (rb, ra) };
        self.parent[hi] = lo as u8;
    }

    /// True when node `x` is merged into a fixed node.
    pub fn is_fixed(&self, x: usize) -> bool {
        self.root(x) < self.fixed
    }

    /// Number the merged nodes that are not fixed: `unknown[x]` for every node.
    pub fn unknowns(&self) -> Numbering {
        let mut number = [None; MAX_NODES];
        let mut m = 0;
        for (x, slot) in number.iter_mut().enumerate().take(self.n).skip(self.fixed) {
            if self.root(x) == x {
                *slot = Some(m as u8);
                m += 1;
            }
        }
        let mut of = [None; MAX_NODES];
        for (x, slot) in of.iter_mut().enumerate().take(self.n) {
            *slot = number[self.root(x)];
        }
        Numbering { of, m }
    }
}

/// The unknown of every node after merging (`None`: held fixed).
#[derive(Debug, Clone, Copy)]
pub struct Numbering {
    of: [Option<u8>; MAX_NODES],
    /// How many unknowns there are.
    pub m: usize,
}

impl Numbering {
    #[inline]
    pub fn of(&self, node: usize) -> Option<usize> {
        self.of[node].map(usize::from)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wires_merge_and_fixed_nodes_stay_fixed() {
        // Nodes 0 (ground) fixed; 1–2 wired, 3 wired to ground, 4 alone.
        let mut m = Merge::new(5, 1);
        m.join(2, 1);
        m.join(3, 0);
        let u = m.unknowns();
        assert_eq!(u.m, 2);
        assert_eq!(u.of(1), u.of(2));
        assert_eq!(u.of(3), None);
        assert_eq!(u.of(0), None);
        assert!(u.of(4).is_some() && u.of(4) != u.of(1));
    }
}
