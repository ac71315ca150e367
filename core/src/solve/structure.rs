//! Phase 1, once per network structure: split off the dead-end trees, number the remaining
//! (core) unknowns, order them, build the permuted sparsity pattern of the head matrix, the
//! scatter map from links to matrix slots, and the symbolic Cholesky factorization.
//!
//! # Forest and core
//! Following Simpson, Elhay & Alexander (2014, "Forest-core partitioning algorithm for speeding
//! up analysis of water distribution systems", J. Water Resour. Plann. Manage. 140(4)), junctions
//! in dead-end trees never enter the matrix: the flow of a tree pipe is the demand of everything
//! beyond it, whatever the heads, and the heads in a tree follow from its root's head by one
//! sweep. The trees are found by peeling: a junction with a single remaining link is a leaf; it
//! is removed with that link, which may make its neighbour a leaf, and so on. Only plain pipes
//! (no check valve) are peeled, so every device stays in the core and its state logic sees the
//! core's heads; a closed tree pipe simply cuts off what lies beyond it. Junctions whose outflow
//! may depend on pressure (see [`nodes`](super::nodes)) are not peeled either: a tree's flows are
//! summed from fixed outflows. [`Structure::trees`] lists
//! the tree pipes leaves first: flows accumulate in that order, heads in the reverse.
//!
//! # Why faer's simplicial Cholesky, and the ordering
//! The head matrix of a street network has about three entries per column and its factor about
//! six to eight: too sparse for supernodes to pay (faer's supernodal factorization, tried on the
//! same ordering at a million junctions, padded the factor from 4.25 to 7.69 million values and
//! was slower). The fill-reducing ordering takes the unknowns with at most two neighbours first
//! (some 40 % of a street network's core: junctions between two pipes), eliminated as minimum
//! degree would eliminate them, and approximate minimum degree (AMD, faer's) for the graph they
//! leave (see `ordering`): the factor is as small as with AMD alone, and AMD works on a smaller
//! graph (measured at a million junctions: 340 ms instead of 521 ms, under load; the factor
//! 4.13 million values instead of 4.20).
use super::topology::Adjacency;
use crate::model::{LinkKind, Model};
use faer::dyn_stack::{MemBuffer, MemStack, StackReq};
use faer::sparse::linalg::amd;
use faer::sparse::linalg::cholesky::simplicial::{self, SymbolicSimplicialCholesky};
use faer::sparse::{SymbolicSparseColMat, SymbolicSparseColMatRef};

/// Where a link writes into the matrix.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LinkSlots {
    /// Permuted unknown of the `from` node, or `NONE` if it is a fixed head.
    pub from: u32,
    /// Permuted unknown of the `to` node, or `NONE`.
    pub to: u32,
    /// Value slot of the off-diagonal entry, or `NONE` unless both ends are unknowns.
    pub off: u32,
}

/// Marker for "no unknown / no slot".
pub const NONE: u32 = u32::MAX;

/// A pipe of a dead-end tree, with the end nearer the core.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TreeLink {
    /// The link.
    pub link: u32,
    /// The end towards the core (a core junction, a fixed head, or a tree junction).
    pub parent: u32,
    /// The end away from the core (a tree junction).
    pub child: u32,
    /// Whether the link points from parent to child (`from == parent`).
    pub downstream: bool,
}

/// A link of the core, with everything the iteration needs to scatter it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CoreLink {
    /// The link.
    pub link: u32,
    /// Its `from` node.
    pub from: u32,
    /// Its `to` node.
    pub to: u32,
    /// Matrix slots.
    pub slots: LinkSlots,
    /// Value slot of the `from` unknown's diagonal, or `NONE`.
    pub diag_from: u32,
    /// Value slot of the `to` unknown's diagonal, or `NONE`.
    pub diag_to: u32,
}

impl CoreLink {
    /// The matrix column the link writes to: that of its later unknown (0 for a link between two
    /// fixed heads).
    pub fn column(&self) -> u32 {
        match (self.slots.from, self.slots.to) {
            (NONE, NONE) => 0,
            (NONE, u) | (u, NONE) => u,
            (a, b) => a.max(b),
        }
    }
}

/// The analysed structure of a network's head matrix.
#[derive(Debug)]
pub struct Structure {
    /// Number of unknown heads.
    pub n: usize,
    /// For each node, its permuted unknown index, or `NONE` for fixed-head nodes.
    pub unknown_of_node: Vec<u32>,
    /// For each permuted unknown, the node it stands for.
    pub node_of_unknown: Vec<u32>,
    /// Upper-triangular CSC pattern of the permuted matrix, rows sorted within each column
    /// (checked once here, not at every factorization).
    upper: SymbolicSparseColMat<u32>,
    /// Value slot of each permuted unknown's diagonal entry.
    pub diag_slot: Vec<u32>,
    /// Links of the core, ordered by the matrix column they write to (for locality).
    pub core: Vec<CoreLink>,
    /// Position of each link in `core`, or `NONE` for tree links.
    pub core_position: Vec<u32>,
    /// Pipes of the dead-end trees, leaves first.
    pub trees: Vec<TreeLink>,
    /// Whether each node is a junction of a dead-end tree.
    pub in_tree: Vec<bool>,
    /// For each node, the links that touch it.
    pub adjacency: Adjacency,
    /// Symbolic Cholesky factor.
    pub symbolic: SymbolicSimplicialCholesky<u32>,
    /// End points `(from, to)` of every link, compact for passes over all links (and the
    /// structure signature with the node kinds).
    pub ends: Vec<(u32, u32)>,
    /// Fixed-head flags per node at analysis time.
    fixed: Vec<bool>,
    /// Whether each link could be peeled into a tree (a plain pipe) at analysis time.
    peelable: Vec<bool>,
    /// Junctions kept in the core because their outflow may depend on pressure (empty when
    /// none is).
    kept: Vec<bool>,
}

/// Whether a link may belong to a dead-end tree: a pipe without a check valve, whatever its
/// status (a closed tree pipe cuts off its subtree, which the tree sweeps handle).
fn peelable(kind: &LinkKind) -> bool {
    matches!(kind, LinkKind::Pipe(p) if !p.check_valve)
}

/// Peels the dead-end trees off the network; returns the tree links, leaves first, and which
/// nodes are tree junctions.
fn peel(
    model: &Model,
    adjacency: &Adjacency,
    fixed: &[bool],
    peelable: &[bool],
    kept: &[bool],
) -> (Vec<TreeLink>, Vec<bool>) {
    let kept = |i: usize| kept.get(i).copied().unwrap_or(false);
    let links = model.links();
    let n = model.nodes().len();
    let mut degree: Vec<u32> = (0..n).map(|i| adjacency.of(i).len() as u32).collect();
    let mut removed = vec![false; links.len()];
    let mut in_tree = vec![false; n];
    let mut trees = Vec::new();
    let mut stack: Vec<u32> =
        (0..n as u32).filter(|&i| !fixed[i as usize] && !kept(i as usize) && degree[i as usize] == 1).collect();
    while let Some(leaf) = stack.pop() {
        let leaf = leaf as usize;
        if in_tree[leaf] || degree[leaf] != 1 {
            continue;
        }
        let Some(&k) = adjacency.of(leaf).iter().find(|&&k| !removed[k as usize]) else { continue };
        if !peelable[k as usize] {
            continue;
        }
        let l = &links[k as usize];
        let parent = if l.from == leaf { l.to } else { l.from };
        removed[k as usize] = true;
        in_tree[leaf] = true;
        degree[leaf] = 0;
        degree[parent] -= 1;
        trees.push(TreeLink { link: k, parent: parent as u32, child: leaf as u32, downstream: l.from == parent });
        if !fixed[parent] && !kept(parent) && degree[parent] == 1 {
            stack.push(parent as u32);
        }
    }
    (trees, in_tree)
}

/// Junctions that stay in the core (empty when the model has no pressure-dependent outflow).
fn kept_nodes(model: &Model) -> Vec<bool> {
    if model.outflow.is_active() {
        super::nodes::pressure_nodes(model)
    } else {
        Vec::new()
    }
}

impl Structure {
    /// Analyses the structure of `model`; `None` when the matrix or its factor would have more
    /// entries than 32-bit indices can number (some four thousand million, far beyond any
    /// network a computer of today could hold).
    pub fn analyse(model: &Model) -> Option<Structure> {
        if u32::try_from(model.nodes().len() + model.links().len()).is_err() {
            return None;
        }
        let nodes = model.nodes();
        let fixed: Vec<bool> = nodes.iter().map(|n| n.fixed_head().is_some()).collect();
        let peelable: Vec<bool> = model.links().iter().map(|l| peelable(&l.kind)).collect();
        let adjacency = Adjacency::new(model);
        let kept = kept_nodes(model);
        let (trees, in_tree) = peel(model, &adjacency, &fixed, &peelable, &kept);
        let mut is_tree_link = vec![false; model.links().len()];
        for t in &trees {
            is_tree_link[t.link as usize] = true;
        }
        // Core unknowns in node order first.
        let mut original = vec![NONE; nodes.len()];
        let mut n = 0usize;
        for (i, f) in fixed.iter().enumerate() {
            if !f && !in_tree[i] {
                original[i] = n as u32;
                n += 1;
            }
        }
        // Neighbour lists (upper part, deduplicated) in original numbering.
        let mut pairs: Vec<(u32, u32)> = Vec::with_capacity(model.links().len());
        for (l, _) in model.links().iter().zip(&is_tree_link).filter(|(_, &t)| !t) {
            let (a, b) = (original[l.from], original[l.to]);
            if a != NONE && b != NONE {
                pairs.push((a.min(b), a.max(b)));
            }
        }
        pairs.sort_unstable();
        pairs.dedup();

        let perm_inv = ordering(n, &pairs);
        let permute = |u: u32| if u == NONE { NONE } else { perm_inv[u as usize] as u32 };

        // Permuted upper-triangular pattern: column max(i, j), row min(i, j), plus the diagonal.
        let mut counts = vec![1usize; n];
        let permuted: Vec<(usize, usize)> = pairs
            .iter()
            .map(|&(a, b)| {
                let (pa, pb) = (permute(a) as usize, permute(b) as usize);
                (pa.min(pb), pa.max(pb))
            })
            .collect();
        for &(_, c) in &permuted {
            counts[c] += 1;
        }
        // 32-bit indices (half the memory of the factor's structure): the check above bounds the
        // matrix's entries (at most one per node and link), the symbolic factorization the
        // factor's.
        let mut col_ptr = vec![0u32; n + 1];
        for j in 0..n {
            col_ptr[j + 1] = col_ptr[j] + counts[j] as u32;
        }
        let at = |p: u32| p as usize;
        let mut row_idx = vec![0u32; at(col_ptr[n])];
        let mut fill: Vec<usize> = col_ptr[..n].iter().map(|&p| at(p)).collect();
        for j in 0..n {
            row_idx[fill[j]] = j as u32;
            fill[j] += 1;
        }
        for &(r, c) in &permuted {
            row_idx[fill[c]] = r as u32;
            fill[c] += 1;
        }
        drop(fill);
        for j in 0..n {
            row_idx[at(col_ptr[j])..at(col_ptr[j + 1])].sort_unstable();
        }
        let slot = |r: usize, c: usize| -> u32 {
            let rows = &row_idx[at(col_ptr[c])..at(col_ptr[c + 1])];
            // The entry is in the pattern by construction.
            let pos = rows.binary_search(&(r as u32)).unwrap_or_else(|p| p);
            col_ptr[c] + pos as u32
        };
        // The symbolic factorization and the scatter map both need only the structure: on two
        // threads at once (a tenth of a first solve of a large network).
        let scatter = || {
            let diag_slot: Vec<u32> = (0..n).map(|j| slot(j, j)).collect();
            let unknown_of_node: Vec<u32> = original.iter().map(|&u| permute(u)).collect();
            let mut node_of_unknown = vec![0u32; n];
            for (node, &u) in unknown_of_node.iter().enumerate() {
                if u != NONE {
                    node_of_unknown[u as usize] = node as u32;
                }
            }
            let links: Vec<LinkSlots> = model
                .links()
                .iter()
                .zip(&is_tree_link)
                .map(|(l, &tree)| {
                    if tree {
                        return LinkSlots { from: NONE, to: NONE, off: NONE };
                    }
                    let (a, b) = (unknown_of_node[l.from], unknown_of_node[l.to]);
                    let off = if a != NONE && b != NONE {
                        let (r, c) = (a.min(b) as usize, a.max(b) as usize);
                        slot(r, c)
                    } else {
                        NONE
                    };
                    LinkSlots { from: a, to: b, off }
                })
                .collect();

            let mut core: Vec<CoreLink> = Vec::with_capacity(is_tree_link.iter().filter(|t| !**t).count());
            core.extend(model.links().iter().enumerate().filter(|&(k, _)| !is_tree_link[k]).map(|(k, l)| {
                let s = links[k];
                let diag = |u: u32| if u == NONE { NONE } else { diag_slot[u as usize] };
                CoreLink {
                    link: k as u32,
                    from: l.from as u32,
                    to: l.to as u32,
                    slots: s,
                    diag_from: diag(s.from),
                    diag_to: diag(s.to),
                }
            }));
            // Column order: consecutive links write to nearby matrix entries and read nearby unknowns.
            let column = |c: &CoreLink| c.column() as usize;
            // A counting sort by column, stable, so links stay in index order within a column (the
            // same order as sorting by (column, link), in linear time).
            if let Some(&first) = core.first() {
                // Column 0 also takes the links between two fixed heads (there may be no unknowns).
                let columns = n.max(1);
                let mut start = vec![0u32; columns + 1];
                for c in &core {
                    start[column(c) + 1] += 1;
                }
                for j in 0..columns {
                    start[j + 1] += start[j];
                }
                let mut sorted = vec![first; core.len()];
                for c in &core {
                    let at = &mut start[column(c)];
                    sorted[*at as usize] = *c;
                    *at += 1;
                }
                core = sorted;
            }
            let mut core_position = vec![NONE; model.links().len()];
            for (i, c) in core.iter().enumerate() {
                core_position[c.link as usize] = i as u32;
            }
            (diag_slot, unknown_of_node, node_of_unknown, core, core_position)
        };
        // The symbolic factorization's work space is allocated here, on this thread: what a
        // helper thread allocates and frees stays in its own heap, and at a million junctions
        // that added 9 MB to the process's peak memory.
        let mut symbolic_work = SymbolicWork::new(n, row_idx.len());
        let ((diag_slot, unknown_of_node, node_of_unknown, core, core_position), symbolic) =
            rayon::join(scatter, || symbolic_factor(n, &col_ptr, &row_idx, &mut symbolic_work));
        let symbolic = symbolic?;
        let ends = model.links().iter().map(|l| (l.from as u32, l.to as u32)).collect();
        Some(Structure {
            n,
            unknown_of_node,
            node_of_unknown,
            upper: SymbolicSparseColMat::new_checked(n, n, col_ptr, None, row_idx),
            diag_slot,
            core,
            core_position,
            trees,
            in_tree,
            adjacency,
            symbolic,
            ends,
            fixed,
            peelable,
            kept,
        })
    }

    /// Whether this analysis still fits `model` (same nodes' roles, same link end points, the
    /// same links eligible for the trees).
    pub fn fits(&self, model: &Model) -> bool {
        model.nodes().len() == self.fixed.len()
            && model.links().len() == self.ends.len()
            && model.nodes().iter().zip(&self.fixed).all(|(n, &f)| n.fixed_head().is_some() == f)
            && model.links().iter().zip(&self.ends).all(|(l, &(a, b))| l.from as u32 == a && l.to as u32 == b)
            && model.links().iter().zip(&self.peelable).all(|(l, &p)| peelable(&l.kind) == p)
            && kept_nodes(model) == self.kept
    }

    /// Number of junctions in dead-end trees (outside the matrix).
    pub fn tree_junctions(&self) -> usize {
        self.trees.len()
    }

    /// Number of stored entries of the upper triangle.
    pub fn nnz(&self) -> usize {
        self.upper.row_idx().len()
    }

    /// Non-zeros of the Cholesky factor.
    pub fn factor_nnz(&self) -> usize {
        self.symbolic.len_val()
    }

    /// The symbolic view of the matrix for faer.
    pub fn matrix(&self) -> SymbolicSparseColMatRef<'_, u32> {
        self.upper.as_ref()
    }
}

/// Fill-reducing ordering of the pattern given as upper pairs (i < j); returns
/// `perm_inv[old] = new`.
///
/// Unknowns with at most two neighbours come first, eliminated one after another as minimum
/// degree would (see [`eliminate_simple`]); AMD orders the rest, on the graph those
/// eliminations leave. In a street network's core some 40 % of the unknowns are junctions
/// between two pipes, so AMD (the larger part of the analysis) works on a graph about that much
/// smaller, and the factor is the same size: eliminating a node of degree two only joins its
/// two neighbours, the least fill any order can give it.
///
/// That order is then renumbered by a postorder of its elimination tree ([`postorder`]): the
/// same factor, entry for entry, with every subtree's columns side by side. Measured on the
/// generated networks (seed 7, under load, least of several runs): the numeric factorization
/// 71 ms instead of 79 at 1e5 junctions and some 10 % less at 1e6, the triangular solves some
/// 25 % less at 1e6; the postorder itself costs one pass over the pattern.
fn ordering(n: usize, pairs: &[(u32, u32)]) -> Vec<usize> {
    let mut perm_inv = minimum_degree_order(n, pairs);
    let post = postorder(n, pairs, &perm_inv);
    for p in perm_inv.iter_mut() {
        *p = post[*p] as usize;
    }
    perm_inv
}

/// The order of [`ordering`] before its postorder: the simple unknowns first, then AMD's.
fn minimum_degree_order(n: usize, pairs: &[(u32, u32)]) -> Vec<usize> {
    if n == 0 {
        return Vec::new();
    }
    let (first, rest, rest_pairs) = eliminate_simple(n, pairs);
    let m = rest.len();
    let mut perm_inv = vec![0usize; n];
    for (new, &old) in first.iter().enumerate() {
        perm_inv[old as usize] = new;
    }
    for (new, old) in amd_order(m, &rest_pairs).into_iter().enumerate() {
        perm_inv[rest[old as usize] as usize] = first.len() + new;
    }
    perm_inv
}

/// A postorder of the elimination tree of the pattern `pairs` numbered by `perm_inv`
/// (`post[old] = new`, both in `perm_inv`'s numbering): every subtree's columns become one
/// contiguous range ending at its root. The factor's pattern and size are unchanged (a
/// postorder is an equivalent ordering: each column keeps its ancestors and descendants), but
/// the columns a row of the factor reaches lie just before it, in memory the factorization and
/// the triangular solves have touched last.
fn postorder(n: usize, pairs: &[(u32, u32)], perm_inv: &[usize]) -> Vec<u32> {
    // Lower neighbours of every column in the new numbering (rows i < j of column j).
    let mut start = vec![0u32; n + 1];
    for &(a, b) in pairs {
        let (pa, pb) = (perm_inv[a as usize], perm_inv[b as usize]);
        start[pa.max(pb) + 1] += 1;
    }
    for j in 0..n {
        start[j + 1] += start[j];
    }
    let mut lower = vec![0u32; start[n] as usize];
    let mut fill = start.clone();
    for &(a, b) in pairs {
        let (pa, pb) = (perm_inv[a as usize], perm_inv[b as usize]);
        let (i, j) = (pa.min(pb), pa.max(pb));
        lower[fill[j] as usize] = i as u32;
        fill[j] += 1;
    }
    drop(fill);
    // The elimination tree (Liu's algorithm with path compression through `ancestor`).
    let mut parent = vec![NONE; n];
    let mut ancestor = vec![NONE; n];
    for j in 0..n {
        for &i in &lower[start[j] as usize..start[j + 1] as usize] {
            let mut i = i as usize;
            while i != j {
                let next = ancestor[i];
                ancestor[i] = j as u32;
                if next == NONE {
                    parent[i] = j as u32;
                    break;
                }
                i = next as usize;
            }
        }
    }
    drop(ancestor);
    drop(lower);
    // Children lists (in increasing order), then a depth-first walk from each root in turn.
    let mut child_start = vec![0u32; n + 1];
    for &p in &parent {
        if p != NONE {
            child_start[p as usize + 1] += 1;
        }
    }
    for j in 0..n {
        child_start[j + 1] += child_start[j];
    }
    let mut children = vec![0u32; child_start[n] as usize];
    let mut fill = child_start.clone();
    for (j, &p) in parent.iter().enumerate() {
        if p != NONE {
            children[fill[p as usize] as usize] = j as u32;
            fill[p as usize] += 1;
        }
    }
    drop(fill);
    let mut post = vec![0u32; n];
    let mut next = 0u32;
    // (node, position of its next child to visit)
    let mut stack: Vec<(u32, u32)> = Vec::new();
    for root in (0..n).filter(|&j| parent[j] == NONE) {
        stack.push((root as u32, child_start[root]));
        while let Some(&mut (node, ref mut at)) = stack.last_mut() {
            if *at < child_start[node as usize + 1] {
                let child = children[*at as usize];
                *at += 1;
                stack.push((child, child_start[child as usize]));
            } else {
                post[node as usize] = next;
                next += 1;
                stack.pop();
            }
        }
    }
    post
}

/// Greedy elimination of the unknowns with at most two neighbours (see [`ordering`]): a node
/// of degree one or zero leaves no fill; one of degree two joins its two neighbours (their
/// degrees stay as they were, or fall by one where they were already joined, which may make
/// them eligible in turn). Returns the eliminated unknowns in order, the others in their
/// original order, and the remaining graph's upper pairs numbered in that order.
fn eliminate_simple(n: usize, pairs: &[(u32, u32)]) -> (Vec<u32>, Vec<u32>, Vec<(u32, u32)>) {
    // Neighbour lists in one array; a list only shrinks or has an entry replaced, never grows.
    let mut start = vec![0u32; n + 1];
    for &(a, b) in pairs {
        start[a as usize + 1] += 1;
        start[b as usize + 1] += 1;
    }
    for j in 0..n {
        start[j + 1] += start[j];
    }
    let mut len = vec![0u32; n];
    let mut adj = vec![0u32; start[n] as usize];
    for &(a, b) in pairs {
        for (x, y) in [(a, b), (b, a)] {
            adj[(start[x as usize] + len[x as usize]) as usize] = y;
            len[x as usize] += 1;
        }
    }
    let list = |len: &[u32], x: usize| (start[x] as usize, start[x] as usize + len[x] as usize);
    let mut gone = vec![false; n];
    let mut queued: Vec<u32> = (0..n as u32).filter(|&x| len[x as usize] <= 2).collect();
    let mut first = Vec::with_capacity(queued.len());
    // Removes `x` from `a`'s list, or puts `y` in its place when `a` and `y` are not yet joined.
    let unlink = |adj: &mut [u32], len: &mut [u32], a: usize, x: u32, y: Option<u32>| {
        let (s, e) = list(len, a);
        let at = s + adj[s..e].iter().position(|&v| v == x).expect("symmetric lists");
        match y {
            Some(y) if !adj[s..e].contains(&y) => adj[at] = y,
            _ => {
                adj[at] = adj[e - 1];
                len[a] -= 1;
            }
        }
    };
    while let Some(x) = queued.pop() {
        let xu = x as usize;
        if gone[xu] || len[xu] > 2 {
            continue;
        }
        gone[xu] = true;
        first.push(x);
        let (s, e) = list(&len, xu);
        let (a0, a1) = (adj[s..e].first().copied(), adj[s..e].get(1).copied());
        for (a, other) in [(a0, a1), (a1, a0)] {
            if let Some(a) = a {
                unlink(&mut adj, &mut len, a as usize, x, other);
                if len[a as usize] <= 2 && !gone[a as usize] {
                    queued.push(a);
                }
            }
        }
    }
    let rest: Vec<u32> = (0..n as u32).filter(|&x| !gone[x as usize]).collect();
    let mut number = vec![NONE; n];
    for (i, &x) in rest.iter().enumerate() {
        number[x as usize] = i as u32;
    }
    let mut rest_pairs = Vec::new();
    for &x in &rest {
        let (s, e) = list(&len, x as usize);
        for &y in &adj[s..e] {
            let (a, b) = (number[x as usize], number[y as usize]);
            if a < b {
                rest_pairs.push((a, b));
            }
        }
    }
    (first, rest, rest_pairs)
}

/// AMD ordering of the pattern given as upper pairs (i < j); returns `order[new] = old`.
///
/// With 32-bit indices, which hold any network the analysis accepts (it checks the model's
/// size): the same order as with 64-bit ones (tested), in 201–252 ms instead of 274–362 ms for
/// the 323,048 unknowns AMD orders at a million junctions (thread CPU time, five runs each),
/// and half the memory, near the solve's peak.
fn amd_order(n: usize, pairs: &[(u32, u32)]) -> Vec<u32> {
    if n == 0 {
        return Vec::new();
    }
    // Upper CSC with diagonal, in original numbering: column j holds rows i ≤ j.
    let mut col_ptr = vec![0u32; n + 1];
    for &(_, j) in pairs {
        col_ptr[j as usize + 1] += 1;
    }
    for j in 0..n {
        col_ptr[j + 1] += col_ptr[j] + 1;
    }
    let mut row_idx = vec![0u32; col_ptr[n] as usize];
    let mut fill = col_ptr[..n].to_vec();
    for &(i, j) in pairs {
        row_idx[fill[j as usize] as usize] = i;
        fill[j as usize] += 1;
    }
    for j in 0..n {
        row_idx[fill[j] as usize] = j as u32;
        fill[j] += 1;
        row_idx[col_ptr[j] as usize..col_ptr[j + 1] as usize].sort_unstable();
    }
    let a = SymbolicSparseColMatRef::new_checked(n, n, &col_ptr, None, &row_idx);
    let mut perm = vec![0u32; n];
    let mut perm_inv = vec![0u32; n];
    let mut mem = MemBuffer::new(amd::order_scratch::<u32>(n, row_idx.len()));
    match amd::order(&mut perm, &mut perm_inv, a, amd::Control::default(), MemStack::new(&mut mem)) {
        Ok(_) => perm,
        // AMD only fails on index overflow, far beyond any network; fall back to the identity.
        Err(_) => (0..n as u32).collect(),
    }
}

/// Work space of [`symbolic_factor`].
struct SymbolicWork {
    etree: Vec<i32>,
    col_counts: Vec<u32>,
    mem: MemBuffer,
}

impl SymbolicWork {
    fn new(n: usize, nnz: usize) -> Self {
        let req = StackReq::any_of(&[
            simplicial::prefactorize_symbolic_cholesky_scratch::<u32>(n, nnz),
            simplicial::factorize_simplicial_symbolic_cholesky_scratch::<u32>(n),
        ]);
        SymbolicWork { etree: vec![0i32; n], col_counts: vec![0u32; n], mem: MemBuffer::new(req) }
    }
}

fn symbolic_factor(
    n: usize,
    col_ptr: &[u32],
    row_idx: &[u32],
    work: &mut SymbolicWork,
) -> Option<SymbolicSimplicialCholesky<u32>> {
    let a = SymbolicSparseColMatRef::new_checked(n, n, col_ptr, None, row_idx);
    let stack = MemStack::new(&mut work.mem);
    let etree_ref = simplicial::prefactorize_symbolic_cholesky(&mut work.etree, &mut work.col_counts, a, stack);
    // Fails only when the factor has more entries than 32-bit indices can number.
    simplicial::factorize_simplicial_symbolic_cholesky(a, etree_ref, &work.col_counts, stack).ok()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::generate::{generate, NetworkSpec};
    use crate::model::{HydraulicOptions, Link, LinkStatus, Node, Pipe, Pump, PumpDrive};
    use crate::physics::pump::{Efficiency, HeadCurve};
    use crate::units::UnitSystem;

    fn pipe(id: &str, from: usize, to: usize, check_valve: bool) -> Link {
        Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe { length: 100.0, diameter: 0.1, roughness: 120.0, minor_loss: 0.0, check_valve }),
        }
    }

    /// R0 – J1 – J2 – J3 around a loop J1 – J4 – J5 – J1, with a branch J2 – J6 – J7, a dead end
    /// J5 – J8 through a check valve and a dead end J4 – J9 through a pump.
    fn network() -> Model {
        let mut m = Model::new(UnitSystem::default(), HydraulicOptions::default());
        m.add_node(Node::reservoir("R0", 50.0)).unwrap();
        for i in 1..=9 {
            m.add_node(Node::junction(format!("J{i}"), 0.0, 1e-3)).unwrap();
        }
        for (k, (a, b)) in [(0, 1), (1, 2), (2, 3), (1, 4), (4, 5), (5, 1), (2, 6), (6, 7)].into_iter().enumerate() {
            m.add_link(pipe(&format!("P{k}"), a, b, false)).unwrap();
        }
        m.add_link(pipe("CV", 5, 8, true)).unwrap();
        let points = vec![(0.0, 30.0), (0.01, 20.0)];
        let curve = HeadCurve::fit(&points).unwrap();
        let drive = PumpDrive::Curve { points, curve };
        let pump = Pump {
            drive,
            efficiency_points: None,
            efficiency: Efficiency::Constant(0.75),
            speed: 1.0,
            elevation: None,
            npsh_required: None,
        };
        m.add_link(Link {
            id: "PU".into(),
            from: 4,
            to: 9,
            status: LinkStatus::Open,
            kind: LinkKind::Pump(Box::new(pump)),
        })
        .unwrap();
        m
    }

    #[test]
    fn core_links_are_in_column_order_then_link_order() {
        let m = network();
        let p = Structure::analyse(&m).unwrap();
        let keys: Vec<(u32, u32)> = p.core.iter().map(|c| (c.column(), c.link)).collect();
        assert!(keys.windows(2).all(|w| w[0] < w[1]), "{keys:?}");
        for (i, c) in p.core.iter().enumerate() {
            assert_eq!(p.core_position[c.link as usize], i as u32);
        }
    }

    #[test]
    fn dead_end_pipes_are_peeled_and_devices_stay_in_the_core() {
        let m = network();
        let p = Structure::analyse(&m).unwrap();
        let tree: Vec<usize> = (0..m.nodes().len()).filter(|&i| p.in_tree[i]).collect();
        // J3 and the branch J7, J6; then J2, left with its one link to J1. Behind the check valve
        // and the pump nothing is peeled, and the loop J1 – J4 – J5 stays.
        assert_eq!(tree, vec![2, 3, 6, 7]);
        assert_eq!(p.tree_junctions(), 4);
        // Leaves first: J7 before J6.
        let order: Vec<u32> = p.trees.iter().map(|t| t.child).collect();
        let (i7, i6) = (order.iter().position(|&c| c == 7).unwrap(), order.iter().position(|&c| c == 6).unwrap());
        assert!(i7 < i6);
        for t in &p.trees {
            let l = &m.links()[t.link as usize];
            assert_eq!(t.downstream, l.from == t.parent as usize);
            assert_eq!(p.core_position[t.link as usize], NONE);
        }
        // Every other junction is an unknown of the matrix, every other link a core link.
        assert_eq!(p.n, 9 - 4);
        assert_eq!(p.core.len(), m.links().len() - 4);
        assert!(p.fits(&m));
    }

    #[test]
    fn a_network_that_is_all_tree_has_an_empty_matrix() {
        let mut m = Model::new(UnitSystem::default(), HydraulicOptions::default());
        m.add_node(Node::reservoir("R", 50.0)).unwrap();
        for i in 1..=4 {
            m.add_node(Node::junction(format!("J{i}"), 0.0, 1e-3)).unwrap();
            m.add_link(pipe(&format!("P{i}"), i - 1, i, false)).unwrap();
        }
        let p = Structure::analyse(&m).unwrap();
        assert_eq!((p.n, p.tree_junctions(), p.core.len()), (0, 4, 0));
        let s = crate::solve::solve(&m).unwrap();
        // Each pipe carries the demand beyond it: 4, 3, 2, 1 L/s.
        for (k, q) in s.flow.iter().enumerate() {
            assert!((q - (4 - k) as f64 * 1e-3).abs() < 1e-15, "{q}");
        }
        assert!(s.max_energy_residual < 1e-12 && s.max_mass_residual < 1e-15);
    }

    #[test]
    fn changing_a_pipe_into_a_check_valve_redoes_the_analysis() {
        let mut m = network();
        let p = Structure::analyse(&m).unwrap();
        let k = m.link_index("P7").unwrap();
        let mut link = m.links()[k].clone();
        if let LinkKind::Pipe(pipe) = &mut link.kind {
            pipe.check_valve = true;
        }
        m.replace_link(k, link).unwrap();
        assert!(!p.fits(&m));
        assert!(!Structure::analyse(&m).unwrap().in_tree[7]);
    }

    /// Factor non-zeros (diagonal included) of the pattern `pairs` eliminated in the order
    /// `perm_inv[old] = new`, by the elimination game; also checks that each of the first
    /// `simple` unknowns had at most two neighbours left when it was eliminated.
    fn fill_of(n: usize, pairs: &[(u32, u32)], perm_inv: &[usize], simple: usize) -> usize {
        use std::collections::BTreeSet;
        let mut seen = vec![false; n];
        for &p in perm_inv {
            assert!(p < n && !seen[p], "the ordering is a permutation");
            seen[p] = true;
        }
        let mut adj: Vec<BTreeSet<usize>> = vec![BTreeSet::new(); n];
        for &(a, b) in pairs {
            let (a, b) = (perm_inv[a as usize], perm_inv[b as usize]);
            adj[a].insert(b);
            adj[b].insert(a);
        }
        let mut nnz = 0;
        for k in 0..n {
            let later: Vec<usize> = adj[k].iter().copied().filter(|&j| j > k).collect();
            if k < simple {
                assert!(later.len() <= 2, "unknown {k}, eliminated first, had {} neighbours", later.len());
            }
            nnz += 1 + later.len();
            for (i, &a) in later.iter().enumerate() {
                for &b in &later[i + 1..] {
                    adj[a].insert(b);
                    adj[b].insert(a);
                }
            }
        }
        nnz
    }

    /// The upper pairs of a model's core, as `Structure::analyse` makes them.
    fn core_pairs(model: &Model) -> (usize, Vec<(u32, u32)>) {
        let s = Structure::analyse(model).unwrap();
        let mut pairs: Vec<(u32, u32)> = s
            .core
            .iter()
            .filter(|c| c.slots.from != NONE && c.slots.to != NONE)
            .map(|c| {
                let (a, b) = (s.node_of_unknown[c.slots.from as usize], s.node_of_unknown[c.slots.to as usize]);
                (a.min(b), a.max(b))
            })
            .collect();
        // Numbered as the analysis numbers them before ordering: core junctions in node order.
        let mut number = vec![NONE; model.nodes().len()];
        let mut sorted: Vec<u32> = s.node_of_unknown.clone();
        sorted.sort_unstable();
        for (i, &node) in sorted.iter().enumerate() {
            number[node as usize] = i as u32;
        }
        for p in &mut pairs {
            let (a, b) = (number[p.0 as usize], number[p.1 as usize]);
            *p = (a.min(b), a.max(b));
        }
        pairs.sort_unstable();
        pairs.dedup();
        (s.n, pairs)
    }

    #[test]
    fn simple_unknowns_are_eliminated_first_with_the_least_fill() {
        // A ring of six, a path of four and a ladder of 2 × 5 (whose corners have two neighbours,
        // and whose rungs become eligible as the corners go): fill by hand.
        let ring: Vec<(u32, u32)> = (0..6).map(|i| (i, (i + 1) % 6)).map(|(a, b)| (a.min(b), a.max(b))).collect();
        let (first, rest, _) = eliminate_simple(6, &ring);
        assert_eq!((first.len(), rest.len()), (6, 0));
        // Each of the first n − 3 joins its two neighbours (two entries below its diagonal), and
        // the triangle left takes two, one and none: 2 (n − 3) + 3, plus n on the diagonal.
        assert_eq!(fill_of(6, &ring, &minimum_degree_order(6, &ring), 6), 6 + 2 * 3 + 3);
        let path = [(0, 1), (1, 2), (2, 3)];
        assert_eq!(fill_of(4, &path, &minimum_degree_order(4, &path), 4), 4 + 3);
        let mut ladder = Vec::new();
        for i in 0..5u32 {
            ladder.push((2 * i, 2 * i + 1));
            if i < 4 {
                ladder.push((2 * i, 2 * i + 2));
                ladder.push((2 * i + 1, 2 * i + 3));
            }
        }
        let (first, rest, _) = eliminate_simple(10, &ladder);
        assert_eq!(first.len() + rest.len(), 10);
        let order = minimum_degree_order(10, &ladder);
        let fill = fill_of(10, &ladder, &order, first.len());
        // A ladder eliminated end to end keeps at most three entries per column.
        assert!(fill <= 10 + 2 * 10, "{fill}");
    }

    #[test]
    fn the_ordering_fills_no_more_than_amd_alone_on_street_networks() {
        for (junctions, seed) in [(2_000, 7), (20_000, 1)] {
            let model = generate(&NetworkSpec::new(junctions, seed)).unwrap();
            let (n, pairs) = core_pairs(&model);
            let (first, _, _) = eliminate_simple(n, &pairs);
            assert!(first.len() * 5 > n, "{} of {n} unknowns are simple", first.len());
            let ours = fill_of(n, &pairs, &minimum_degree_order(n, &pairs), first.len());
            // The postorder changes no column's count, only where it stands.
            assert_eq!(fill_of(n, &pairs, &ordering(n, &pairs), 0), ours);
            let mut amd_alone = vec![0usize; n];
            for (new, old) in amd_order(n, &pairs).into_iter().enumerate() {
                amd_alone[old as usize] = new;
            }
            let theirs = fill_of(n, &pairs, &amd_alone, 0);
            assert!(ours as f64 <= 1.01 * theirs as f64, "{junctions} junctions: {ours} against AMD's {theirs}");
            // And the analysis's symbolic factor is the one the game counts.
            assert_eq!(Structure::analyse(&model).unwrap().factor_nnz(), ours);
        }
    }

    /// The ordering's elimination tree is postordered: every column's descendants are the
    /// columns just before it (as many as its subtree holds), and every parent comes after its
    /// child; checked on generated street networks, a ring and a path.
    /// AMD with 32-bit indices orders as with 64-bit ones (faer's `amd::order` with `usize`),
    /// on the graphs it is given (the unknowns left after the simple ones) and on whole cores.
    #[test]
    fn amd_orders_the_same_with_32_bit_indices() {
        for (junctions, seed) in [(300, 3), (2000, 7), (5000, 11)] {
            let m = generate(&NetworkSpec::new(junctions, seed)).unwrap();
            let (n, pairs) = core_pairs(&m);
            let (_, rest, rest_pairs) = eliminate_simple(n, &pairs);
            for (n, pairs) in [(rest.len(), &rest_pairs), (n, &pairs)] {
                let mut col_ptr = vec![0usize; n + 1];
                let mut row_idx = Vec::new();
                let mut columns = vec![Vec::new(); n];
                for &(i, j) in pairs.iter() {
                    columns[j as usize].push(i as usize);
                }
                for (j, rows) in columns.iter_mut().enumerate() {
                    rows.push(j);
                    rows.sort_unstable();
                    row_idx.extend_from_slice(rows);
                    col_ptr[j + 1] = row_idx.len();
                }
                let a = SymbolicSparseColMatRef::new_checked(n, n, &col_ptr, None, &row_idx);
                let (mut perm, mut perm_inv) = (vec![0usize; n], vec![0usize; n]);
                let mut mem = MemBuffer::new(amd::order_scratch::<usize>(n, row_idx.len()));
                amd::order(&mut perm, &mut perm_inv, a, amd::Control::default(), MemStack::new(&mut mem)).unwrap();
                let ours: Vec<usize> = amd_order(n, pairs).into_iter().map(|p| p as usize).collect();
                assert!(n > 50);
                assert_eq!(ours, perm, "{junctions} junctions, seed {seed}, {n} unknowns");
            }
        }
    }

    #[test]
    fn the_ordering_is_a_postorder_of_its_elimination_tree() {
        let ring: Vec<(u32, u32)> = (0..9).map(|i| (i, (i + 1) % 9)).map(|(a, b)| (a.min(b), a.max(b))).collect();
        let path: Vec<(u32, u32)> = (0..7).map(|i| (i, i + 1)).collect();
        let mut cases = vec![(9, ring), (8, path)];
        for (junctions, seed) in [(500, 3), (3_000, 7)] {
            let model = generate(&NetworkSpec::new(junctions, seed)).unwrap();
            cases.push(core_pairs(&model));
        }
        for (n, pairs) in cases {
            let perm_inv = ordering(n, &pairs);
            // The elimination tree by the definition: a column's parent is the lowest row below
            // its diagonal in the factor (the elimination game's first later neighbour).
            use std::collections::BTreeSet;
            let mut adj: Vec<BTreeSet<usize>> = vec![BTreeSet::new(); n];
            for &(a, b) in &pairs {
                let (a, b) = (perm_inv[a as usize], perm_inv[b as usize]);
                adj[a].insert(b);
                adj[b].insert(a);
            }
            let mut parent = vec![usize::MAX; n];
            for k in 0..n {
                let later: Vec<usize> = adj[k].iter().copied().filter(|&j| j > k).collect();
                if let Some(&p) = later.first() {
                    parent[k] = p;
                }
                for (i, &a) in later.iter().enumerate() {
                    for &b in &later[i + 1..] {
                        adj[a].insert(b);
                        adj[b].insert(a);
                    }
                }
            }
            let mut size = vec![1usize; n];
            for k in 0..n {
                if parent[k] != usize::MAX {
                    assert!(parent[k] > k);
                    size[parent[k]] += size[k];
                }
            }
            for (k, &size) in size.iter().enumerate() {
                // Every column of k's subtree lies in [k + 1 − size, k]: walk up from each.
                for j in k + 1 - size..k {
                    let mut a = j;
                    while a != usize::MAX && a < k {
                        a = parent[a];
                    }
                    assert_eq!(a, k, "column {j} lies in the range of {k}'s subtree but is not in it (n {n})");
                }
            }
        }
    }
}
