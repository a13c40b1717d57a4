//! The named stages of [`Morphology::from_swc`](super::Morphology::from_swc), in the order it
//! runs them: id index → parent links → cycle check → adjacency → trees → root choice → soma set
//! → parents-first order → permutation. Each stage is a loop over arrays (no recursion) and is
//! tested on its own below.

use super::{NONE, TreeInfo, kind};
use crate::swc::{Fault, SwcPoint, Warning};
use std::collections::HashMap;

/// A stage's refusal: the SWC line it names and the fault.
pub(super) type LineFault = (usize, Fault);

/// Point ids → file index. Ids that fill a compact range 0..=max with max < 4n + 1024 (the
/// usual case: 1..n) use a plain table indexed by the id, several times faster than hashing for
/// a million points; any other ids use a hash map. So the largest array sized by an id is
/// 4n + 1024 entries.
pub(super) enum IdIndex {
    Dense(Vec<u32>),
    Sparse(HashMap<i64, u32>),
}

impl IdIndex {
    /// Stage 1: every id of `raw` → its index; a repeated id is refused at its second line.
    pub(super) fn build(raw: &[SwcPoint]) -> Result<IdIndex, LineFault> {
        let n = raw.len();
        let (lo, hi) = raw.iter().fold((i64::MAX, i64::MIN), |(lo, hi), p| {
            (lo.min(p.id), hi.max(p.id))
        });
        let mut index = if lo >= 0 && (hi as u64) < 4 * n as u64 + 1024 {
            IdIndex::Dense(vec![NONE; hi as usize + 1])
        } else {
            IdIndex::Sparse(HashMap::with_capacity(n))
        };
        for (i, p) in raw.iter().enumerate() {
            if let Some(first) = index.insert(p.id, i as u32) {
                let first_line = raw[first as usize].line;
                return Err((
                    p.line,
                    Fault::DuplicateId {
                        id: p.id,
                        first_line,
                    },
                ));
            }
        }
        Ok(index)
    }

    /// Records `id` at `index`; returns the earlier index if the id was seen before.
    fn insert(&mut self, id: i64, index: u32) -> Option<u32> {
        match self {
            IdIndex::Dense(t) => {
                let slot = &mut t[id as usize];
                if *slot != NONE {
                    return Some(*slot);
                }
                *slot = index;
                None
            }
            IdIndex::Sparse(m) => match m.entry(id) {
                std::collections::hash_map::Entry::Occupied(e) => Some(*e.get()),
                std::collections::hash_map::Entry::Vacant(e) => {
                    e.insert(index);
                    None
                }
            },
        }
    }

    pub(super) fn get(&self, id: i64) -> Option<u32> {
        match self {
            IdIndex::Dense(t) => usize::try_from(id)
                .ok()
                .and_then(|i| t.get(i))
                .copied()
                .filter(|&j| j != NONE),
            IdIndex::Sparse(m) => m.get(&id).copied(),
        }
    }
}

/// Stage 2: the parent index of every point in file order (`NONE` for -1); a parent id that no
/// point has is refused at the child's line.
pub(super) fn parent_links(raw: &[SwcPoint], ids: &IdIndex) -> Result<Vec<u32>, LineFault> {
    let mut file_parent = vec![NONE; raw.len()];
    for (i, p) in raw.iter().enumerate() {
        if p.parent == -1 {
            continue;
        }
        match ids.get(p.parent) {
            Some(j) => file_parent[i] = j,
            None => {
                let fault = Fault::MissingParent {
                    id: p.id,
                    parent: p.parent,
                };
                return Err((p.line, fault));
            }
        }
    }
    Ok(file_parent)
}

/// Stage 3: the first point (in file order) of a cycle of parent links, if there is one. Every
/// point has at most one parent, so walking up from each point either reaches a root, a point
/// already known to lead to a root, or comes back to the current walk: a cycle. Each point is
/// walked once: O(n), no recursion.
pub(super) fn find_cycle(parent: &[u32]) -> Option<usize> {
    const NEW: u8 = 0;
    const WALKING: u8 = 1;
    const DONE: u8 = 2;
    let mut state = vec![NEW; parent.len()];
    let mut path: Vec<usize> = Vec::new();
    for s in 0..parent.len() {
        let mut j = s;
        while state[j] == NEW {
            state[j] = WALKING;
            path.push(j);
            match parent[j] {
                NONE => break,
                p => j = p as usize,
            }
        }
        if state[j] == WALKING && parent[j] != NONE {
            // j is on the cycle; go round it once for its first point in file order
            let mut first = j;
            let mut k = parent[j] as usize;
            while k != j {
                first = first.min(k);
                k = parent[k] as usize;
            }
            return Some(first);
        }
        for &k in &path {
            state[k] = DONE;
        }
        path.clear();
    }
    None
}

/// Stage 4: undirected adjacency of the parent links in compressed rows (CSR), for re-rooting
/// and ordering. Each point's neighbours are its parent first (if any), then its children in
/// file order.
pub(super) struct Adjacency {
    start: Vec<u32>,
    adj: Vec<u32>,
}

impl Adjacency {
    pub(super) fn new(file_parent: &[u32]) -> Adjacency {
        let n = file_parent.len();
        let mut deg = vec![0u32; n + 1];
        for (i, &p) in file_parent.iter().enumerate() {
            if p != NONE {
                deg[i] += 1;
                deg[p as usize] += 1;
            }
        }
        let mut start = vec![0u32; n + 1];
        for i in 0..n {
            start[i + 1] = start[i] + deg[i];
        }
        let mut fill = start.clone();
        let mut adj = vec![0u32; start[n] as usize];
        for (i, &p) in file_parent.iter().enumerate() {
            if p != NONE {
                adj[fill[i] as usize] = p;
                fill[i] += 1;
                adj[fill[p as usize] as usize] = i as u32;
                fill[p as usize] += 1;
            }
        }
        Adjacency { start, adj }
    }

    pub(super) fn neighbours(&self, i: u32) -> &[u32] {
        &self.adj[self.start[i as usize] as usize..self.start[i as usize + 1] as usize]
    }
}

/// Stage 5: the connected trees in file order, their sizes and soma-point counts, and the main
/// tree: the one with the most soma points (or, without a soma, the most points; ties go to the
/// earlier tree).
pub(super) struct Trees {
    /// Tree of each point (file order).
    pub tree_of: Vec<u32>,
    pub sizes: Vec<usize>,
    pub soma_points: Vec<usize>,
    pub main: usize,
}

impl Trees {
    pub(super) fn find(adj: &Adjacency, soma_kind: &[bool]) -> Trees {
        let n = soma_kind.len();
        let mut tree_of = vec![NONE; n];
        let (mut sizes, mut soma_points) = (Vec::new(), Vec::new());
        let mut stack: Vec<u32> = Vec::new();
        for s in 0..n {
            if tree_of[s] != NONE {
                continue;
            }
            let t = sizes.len();
            sizes.push(0);
            soma_points.push(0);
            tree_of[s] = t as u32;
            stack.push(s as u32);
            while let Some(k) = stack.pop() {
                sizes[t] += 1;
                soma_points[t] += soma_kind[k as usize] as usize;
                for &m in adj.neighbours(k) {
                    if tree_of[m as usize] == NONE {
                        tree_of[m as usize] = t as u32;
                        stack.push(m);
                    }
                }
            }
        }
        let has_soma = soma_points.iter().any(|&c| c > 0);
        let main = (0..sizes.len())
            .max_by_key(|&t| {
                let soma = if has_soma { soma_points[t] } else { 0 };
                (soma_points[t] > 0, soma, sizes[t], std::cmp::Reverse(t))
            })
            .unwrap_or(0);
        Trees {
            tree_of,
            sizes,
            soma_points,
            main,
        }
    }

    pub(super) fn has_soma(&self) -> bool {
        self.soma_points.iter().any(|&c| c > 0)
    }
}

/// Stage 6: where the main tree is rooted: (its root in the file, the chosen root). The file's
/// root is kept when it is a soma point or the tree has no soma; otherwise the tree's first
/// soma point in file order is the root, with a `re-rooted` warning.
pub(super) fn choose_root(
    raw: &[SwcPoint],
    file_parent: &[u32],
    trees: &Trees,
    warns: &mut Vec<Warning>,
) -> (usize, usize) {
    let n = raw.len();
    let main = trees.main as u32;
    let file_root = (0..n)
        .find(|&i| trees.tree_of[i] == main && file_parent[i] == NONE)
        .unwrap_or(0);
    if raw[file_root].kind == kind::SOMA || trees.soma_points[trees.main] == 0 {
        return (file_root, file_root);
    }
    let s = (0..n)
        .find(|&i| trees.tree_of[i] == main && raw[i].kind == kind::SOMA)
        .unwrap_or(file_root);
    warns.push(Warning::new(
        "re-rooted",
        Some(raw[s].line),
        format!(
            "the tree's root (line {}) is not a soma point; the tree is re-rooted at the soma point on line {}",
            raw[file_root].line, raw[s].line
        ),
    ));
    (file_root, s)
}

/// Stage 7: the soma: the soma points joined to `root` through soma points (none when the root
/// is not a soma point). Returns the per-point flags and the members in file order.
pub(super) fn soma_set(adj: &Adjacency, soma_kind: &[bool], root: usize) -> (Vec<bool>, Vec<u32>) {
    let mut in_soma = vec![false; soma_kind.len()];
    let mut members: Vec<u32> = Vec::new();
    if !soma_kind[root] {
        return (in_soma, members);
    }
    in_soma[root] = true;
    let mut stack = vec![root as u32];
    while let Some(k) = stack.pop() {
        members.push(k);
        for &m in adj.neighbours(k) {
            if !in_soma[m as usize] && soma_kind[m as usize] {
                in_soma[m as usize] = true;
                stack.push(m);
            }
        }
    }
    members.sort_unstable();
    (in_soma, members)
}

/// The warnings about the file's shape found by stages 5–7: soma points not joined to the
/// soma, no soma at all, several trees.
pub(super) fn shape_warnings(
    raw: &[SwcPoint],
    trees: &Trees,
    in_soma: &[bool],
    (file_root, root): (usize, usize),
    warns: &mut Vec<Warning>,
) {
    let stray = |i: &usize| raw[*i].kind == kind::SOMA && !in_soma[*i];
    let stray_soma = (0..raw.len()).filter(stray).count();
    if stray_soma > 0 {
        let first = (0..raw.len()).find(stray).map(|i| raw[i].line);
        warns.push(Warning::new(
            "soma-elsewhere",
            first,
            format!(
                "{stray_soma} soma point(s) are not joined to the main soma; they are treated as neurite points"
            ),
        ));
    }
    let has_soma = trees.has_soma();
    if !has_soma {
        warns.push(Warning::new(
            "no-soma",
            None,
            format!(
                "the file has no soma point (type 1); the root on line {} stands in for the soma",
                raw[file_root].line
            ),
        ));
    }
    let n_trees = trees.sizes.len();
    if n_trees > 1 {
        warns.push(Warning::new(
            "several-trees",
            None,
            format!(
                "the file holds {n_trees} separate trees; all are kept, the one with {} (root on line {}, {} points) is the cell's main tree",
                if has_soma { "the soma" } else { "the most points" },
                raw[root].line,
                trees.sizes[trees.main]
            ),
        ));
    }
}

/// Stage 8's result: file indices in parents-first order, each point's parent (file index,
/// `NONE` for roots), the trees (main tree first) and the main tree's size.
pub(super) struct Order {
    pub order: Vec<u32>,
    pub parent: Vec<u32>,
    pub trees: Vec<TreeInfo>,
    pub main_len: usize,
}

/// Breadth-first from `seeds` over unseen points, appending to `order` and setting each new
/// point's parent; returns how many points were added.
fn bfs(adj: &Adjacency, seeds: &[u32], o: &mut Order, seen: &mut [bool]) -> usize {
    let begin = o.order.len();
    for &s in seeds {
        seen[s as usize] = true;
        o.order.push(s);
    }
    let mut head = begin;
    while head < o.order.len() {
        let k = o.order[head];
        head += 1;
        for &m in adj.neighbours(k) {
            if !seen[m as usize] {
                seen[m as usize] = true;
                o.parent[m as usize] = k;
                o.order.push(m);
            }
        }
    }
    o.order.len() - begin
}

/// Stage 8: the parents-first order. The main tree comes first, from its root: a soma of
/// several points is walked first within itself (so soma points lead, each linked to a soma
/// parent), then everything else breadth-first from all soma points; then every other tree
/// from its file root.
pub(super) fn parents_first(
    adj: &Adjacency,
    file_parent: &[u32],
    in_soma: &[bool],
    soma: &[u32],
    root: usize,
) -> Order {
    let n = file_parent.len();
    let mut o = Order {
        order: Vec::with_capacity(n),
        parent: vec![NONE; n],
        trees: Vec::new(),
        main_len: 0,
    };
    let mut seen = vec![false; n];
    o.main_len = if soma.len() > 1 {
        let mut soma_order: Vec<u32> = vec![root as u32];
        let mut seen_s = vec![false; n];
        seen_s[root] = true;
        let mut h = 0;
        while h < soma_order.len() {
            let k = soma_order[h];
            h += 1;
            for &m in adj.neighbours(k) {
                if in_soma[m as usize] && !seen_s[m as usize] {
                    seen_s[m as usize] = true;
                    o.parent[m as usize] = k;
                    soma_order.push(m);
                }
            }
        }
        // keep the soma's own links; the walk from all soma points must not replace them
        let saved: Vec<(u32, u32)> = soma_order
            .iter()
            .map(|&s| (s, o.parent[s as usize]))
            .collect();
        let len = bfs(adj, &soma_order, &mut o, &mut seen);
        for (s, p) in saved {
            o.parent[s as usize] = p;
        }
        len
    } else {
        bfs(adj, &[root as u32], &mut o, &mut seen)
    };
    o.trees.push(TreeInfo {
        root: 0,
        points: o.main_len,
    });
    for s in 0..n {
        if !seen[s] && file_parent[s] == NONE {
            let begin = o.order.len() as u32;
            let len = bfs(adj, &[s as u32], &mut o, &mut seen);
            o.trees.push(TreeInfo {
                root: begin,
                points: len,
            });
        }
    }
    debug_assert_eq!(o.order.len(), n);
    o
}

/// Stage 9: moves the points into the new order in place (no second copy of a large file) and
/// gives the parent index and soma flag of each point in that order. Each point's `parent` is
/// rewritten to its new parent's id.
pub(super) fn permute(
    mut points: Vec<SwcPoint>,
    o: &Order,
    in_soma: &[bool],
) -> (Vec<SwcPoint>, Vec<u32>, Vec<bool>) {
    let n = points.len();
    let mut new_index = vec![NONE; n];
    for (ni, &fi) in o.order.iter().enumerate() {
        new_index[fi as usize] = ni as u32;
    }
    let mut parent = vec![NONE; n];
    let mut is_soma = vec![false; n];
    for (ni, &fi) in o.order.iter().enumerate() {
        let pf = o.parent[fi as usize];
        if pf != NONE {
            parent[ni] = new_index[pf as usize];
        }
        is_soma[ni] = in_soma[fi as usize];
    }
    // the point now at slot i belongs at new_index[i]; each swap puts one point in its place
    let mut dest = new_index;
    for i in 0..n {
        while dest[i] as usize != i {
            let j = dest[i] as usize;
            points.swap(i, j);
            dest.swap(i, j);
        }
    }
    for i in 0..n {
        points[i].parent = match parent[i] {
            NONE => -1,
            p => points[p as usize].id,
        };
    }
    (points, parent, is_soma)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::swc::parse_str;

    fn raw(text: &str) -> Vec<SwcPoint> {
        parse_str(text, "t.swc").unwrap().points
    }

    #[test]
    fn id_index_is_dense_up_to_4n_plus_1024_and_refuses_repeats() {
        let pts = raw("1 1 0 0 0 1 -1\n1027 3 1 0 0 1 1\n");
        // n = 2: ids up to 4·2 + 1024 − 1 = 1031 use the table
        assert!(matches!(IdIndex::build(&pts).unwrap(), IdIndex::Dense(t) if t.len() == 1028));
        let pts = raw("1 1 0 0 0 1 -1\n1032 3 1 0 0 1 1\n");
        let ids = IdIndex::build(&pts).unwrap();
        assert!(matches!(ids, IdIndex::Sparse(_)));
        assert_eq!(
            (ids.get(1032), ids.get(7), ids.get(-1)),
            (Some(1), None, None)
        );
        let pts = raw("5 1 0 0 0 1 -1\n6 3 1 0 0 1 5\n5 3 2 0 0 1 6\n");
        let e = IdIndex::build(&pts).err().unwrap();
        assert!(matches!(
            e,
            (
                3,
                Fault::DuplicateId {
                    id: 5,
                    first_line: 1
                }
            )
        ));
    }

    #[test]
    fn parent_links_name_the_missing_parent() {
        let pts = raw("1 1 0 0 0 1 -1\n2 3 1 0 0 1 1\n3 3 2 0 0 1 9\n");
        let ids = IdIndex::build(&pts).unwrap();
        let e = parent_links(&pts, &ids).err().unwrap();
        assert!(matches!(e, (3, Fault::MissingParent { id: 3, parent: 9 })));
        let pts = raw("1 1 0 0 0 1 -1\n2 3 1 0 0 1 1\n3 3 2 0 0 1 1\n");
        let ids = IdIndex::build(&pts).unwrap();
        assert_eq!(parent_links(&pts, &ids).unwrap(), vec![NONE, 0, 0]);
    }

    #[test]
    fn cycles_are_found_at_their_first_point() {
        assert_eq!(find_cycle(&[NONE, 0, 1, 2]), None);
        // 0 → 3 → 2 → 0 with a tail 1 → 0: the cycle's first point in file order is 0
        assert_eq!(find_cycle(&[3, 0, 0, 2]), Some(0));
        // a tail walked first (3 → 2), then the cycle 1 ⇄ 2
        assert_eq!(find_cycle(&[NONE, 2, 1, 2]), Some(1));
    }

    #[test]
    fn adjacency_lists_parent_then_children() {
        let adj = Adjacency::new(&[NONE, 0, 0, 1]);
        assert_eq!(adj.neighbours(0), &[1, 2]);
        assert_eq!(adj.neighbours(1), &[0, 3]);
        assert_eq!(adj.neighbours(3), &[1]);
    }

    #[test]
    fn trees_root_and_soma_are_chosen_as_documented() {
        // tree A: points 0..=2 without soma; tree B: dendrite root 3 with soma points 4, 5 and
        // a soma point 6 beyond a dendrite point (not joined to the soma)
        let pts = raw("1 3 0 0 0 1 -1\n2 3 1 0 0 1 1\n3 3 2 0 0 1 2\n\
                       10 3 0 5 0 1 -1\n11 1 0 6 0 3 10\n12 1 0 7 0 3 11\n\
                       13 3 0 8 0 1 12\n14 1 0 9 0 3 13\n");
        let ids = IdIndex::build(&pts).unwrap();
        let fp = parent_links(&pts, &ids).unwrap();
        let adj = Adjacency::new(&fp);
        let soma_kind: Vec<bool> = pts.iter().map(|p| p.kind == kind::SOMA).collect();
        let trees = Trees::find(&adj, &soma_kind);
        assert_eq!((trees.sizes.clone(), trees.main), (vec![3, 5], 1));
        let mut w = Vec::new();
        let (file_root, root) = choose_root(&pts, &fp, &trees, &mut w);
        assert_eq!((file_root, root), (3, 4));
        assert_eq!(w[0].code, "re-rooted");
        let (in_soma, members) = soma_set(&adj, &soma_kind, root);
        assert_eq!(members, vec![4, 5]);
        assert!(!in_soma[7]);
        shape_warnings(&pts, &trees, &in_soma, (file_root, root), &mut w);
        let codes: Vec<&str> = w.iter().map(|x| x.code).collect();
        assert_eq!(codes, ["re-rooted", "soma-elsewhere", "several-trees"]);
        // order: the soma leads, every parent before its child, the main tree first
        let o = parents_first(&adj, &fp, &in_soma, &members, root);
        assert_eq!(o.main_len, 5);
        assert_eq!(&o.order[..2], &[4, 5]);
        let pos: Vec<usize> = (0..8)
            .map(|f| o.order.iter().position(|&x| x == f).unwrap())
            .collect();
        for f in 0..8 {
            if o.parent[f] != NONE {
                assert!(pos[o.parent[f] as usize] < pos[f]);
            }
        }
        assert_eq!(o.trees.len(), 2);
        assert_eq!((o.trees[1].root, o.trees[1].points), (5, 3));
        // the permutation rewrites parents as ids of the new orientation
        let (p, parent, is_soma) = permute(pts, &o, &in_soma);
        assert_eq!(p[0].id, 11);
        assert_eq!(p[0].parent, -1);
        assert!(is_soma[0] && is_soma[1]);
        let i10 = p.iter().position(|x| x.id == 10).unwrap();
        assert_eq!(p[i10].parent, 11);
        assert_eq!(parent[i10], 0);
    }
}
