//! The dead-end trees (the forest; see [`structure`](super::structure)): their flows from the
//! outflows beyond each pipe, leaves to root, once per set of device states; their heads from
//! their roots' after the core has converged, root to leaves, on the exact laws.

use super::Solver;

impl Solver {
    /// Flows of the tree pipes (the demand beyond each, leaves first) and the demand each core
    /// unknown then carries.
    pub(super) fn tree_flows(&mut self) {
        self.subtree.iter_mut().for_each(|s| *s = 0.0);
        let mut sum = 0.0;
        for t in &self.structure.trees {
            let (k, child, parent) = (t.link as usize, t.child as usize, t.parent as usize);
            if !self.open[k] {
                self.flow[k] = 0.0;
                continue;
            }
            let beyond = self.demand[child] + self.subtree[child];
            self.subtree[parent] += beyond;
            self.flow[k] = if t.downstream { beyond } else { -beyond };
            sum += beyond.abs();
        }
        self.tree_flow_sum = sum;
        for (u, &node) in self.structure.node_of_unknown.iter().enumerate() {
            let node = node as usize;
            self.unknown_demand[u] = self.demand[node] + self.subtree[node];
        }
    }

    /// Heads of the tree junctions from their roots' heads, root to leaves, on the exact laws.
    pub(super) fn tree_heads(&mut self) {
        for t in self.structure.trees.iter().rev() {
            let (k, child, parent) = (t.link as usize, t.child as usize, t.parent as usize);
            self.head[child] = if self.connected[child] {
                let loss = self.laws[k].evaluate_exact(self.flow[k]).0;
                if t.downstream {
                    self.head[parent] - loss
                } else {
                    self.head[parent] + loss
                }
            } else {
                f64::NAN
            };
        }
    }

    /// Copies the core flows into the per-link flows, and the unknowns' heads into the nodes'.
    pub(super) fn sync_flows(&mut self) {
        for (c, &q) in self.structure.core.iter().zip(&self.cq) {
            self.flow[c.link as usize] = q;
        }
        for (&node, &h) in self.structure.node_of_unknown.iter().zip(&self.unknown_head) {
            self.head[node as usize] = h;
        }
    }
}
