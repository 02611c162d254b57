//! Groups of near-duplicates from the pairs of a self-join.

use super::Pair;

/// How pairs make groups. Every rule is deterministic: it depends on the pairs only, not on
/// their order or the number of threads.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Grouping {
    /// Connected components of the pair graph (union-find). Pairs chain: A–B and B–C put A
    /// and C in one group however far apart they are, so a component can hold items far
    /// more than the radius apart.
    Components,
    /// Each group has a centre, and every member is within the radius of its centre (so
    /// two members are at most twice the radius apart). Greedy: items are taken in order of
    /// most pairs first (ties: smaller item number); an item not yet in a group becomes a
    /// centre and takes every paired item not yet in a group.
    #[default]
    Centre,
    /// Every two members of a group are within the radius of each other (the group's
    /// diameter is at most the radius). Greedy: seeds are taken in order of most pairs
    /// first (ties: smaller item number); a seed not yet in a group takes its paired items
    /// not yet in a group, nearest first (ties: smaller item number), each only if it is
    /// paired with every member taken so far.
    Clique,
}

/// One group: its members by item number, and its centre under [`Grouping::Centre`].
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Group {
    /// Item numbers, ascending.
    pub members: Vec<u32>,
    /// The centre, under [`Grouping::Centre`].
    pub centre: Option<u32>,
}

/// Groups `n` items by `pairs` (each unordered pair once or more; pairs of an item with
/// itself are ignored). Groups are ordered by their smallest item number; items in no
/// pair are left out unless `singletons`.
pub fn group(n: usize, pairs: &[Pair], how: Grouping, singletons: bool) -> Vec<Group> {
    let adj = Adjacency::new(n, pairs);
    let mut groups = match how {
        Grouping::Components => components(n, pairs),
        Grouping::Centre => greedy(&adj, false),
        Grouping::Clique => greedy(&adj, true),
    };
    if !singletons {
        groups.retain(|g| g.members.len() > 1);
    }
    for g in &mut groups {
        g.members.sort_unstable();
    }
    groups.sort_unstable_by_key(|g| g.members[0]);
    groups
}

/// Each item's paired items, sorted by (distance, item number), deduplicated.
struct Adjacency {
    start: Vec<usize>,
    to: Vec<(u32, f64)>,
}

impl Adjacency {
    fn new(n: usize, pairs: &[Pair]) -> Adjacency {
        let mut deg = vec![0usize; n + 1];
        for p in pairs.iter().filter(|p| p.a != p.b) {
            deg[p.a as usize] += 1;
            deg[p.b as usize] += 1;
        }
        let mut start = vec![0usize; n + 1];
        for i in 0..n {
            start[i + 1] = start[i] + deg[i];
        }
        let mut fill = start.clone();
        let mut to = vec![(0u32, 0.0f64); start[n]];
        for p in pairs.iter().filter(|p| p.a != p.b) {
            to[fill[p.a as usize]] = (p.b, p.distance);
            fill[p.a as usize] += 1;
            to[fill[p.b as usize]] = (p.a, p.distance);
            fill[p.b as usize] += 1;
        }
        // Each list sorted by item (repeated pairs dropped, the nearest kept), then by
        // (distance, item).
        let mut out_start = vec![0usize; n + 1];
        let mut out = Vec::with_capacity(to.len());
        for i in 0..n {
            let s = &mut to[start[i]..start[i + 1]];
            s.sort_unstable_by(|x, y| x.0.cmp(&y.0).then(x.1.total_cmp(&y.1)));
            let from = out.len();
            for &(j, d) in s.iter() {
                if out[from..].last().is_none_or(|&(l, _): &(u32, f64)| l != j) {
                    out.push((j, d));
                }
            }
            out[from..].sort_unstable_by(|x: &(u32, f64), y: &(u32, f64)| {
                x.1.total_cmp(&y.1).then(x.0.cmp(&y.0))
            });
            out_start[i + 1] = out.len();
        }
        Adjacency {
            start: out_start,
            to: out,
        }
    }

    fn of(&self, i: usize) -> &[(u32, f64)] {
        &self.to[self.start[i]..self.start[i + 1]]
    }

    fn paired(&self, i: u32, j: u32) -> bool {
        self.of(i as usize).iter().any(|&(x, _)| x == j)
    }
}

fn components(n: usize, pairs: &[Pair]) -> Vec<Group> {
    let mut parent: Vec<u32> = (0..n as u32).collect();
    fn find(parent: &mut [u32], mut x: u32) -> u32 {
        while parent[x as usize] != x {
            let up = parent[parent[x as usize] as usize];
            parent[x as usize] = up;
            x = up;
        }
        x
    }
    for p in pairs {
        let (a, b) = (find(&mut parent, p.a), find(&mut parent, p.b));
        if a != b {
            // The smaller root wins, so roots are each component's smallest item.
            let (lo, hi) = (a.min(b), a.max(b));
            parent[hi as usize] = lo;
        }
    }
    let mut at: Vec<Option<usize>> = vec![None; n];
    let mut groups: Vec<Group> = Vec::new();
    for i in 0..n as u32 {
        let r = find(&mut parent, i) as usize;
        let g = *at[r].get_or_insert_with(|| {
            groups.push(Group {
                members: Vec::new(),
                centre: None,
            });
            groups.len() - 1
        });
        groups[g].members.push(i);
    }
    groups
}

fn greedy(adj: &Adjacency, clique: bool) -> Vec<Group> {
    let n = adj.start.len() - 1;
    let mut seeds: Vec<u32> = (0..n as u32).collect();
    seeds.sort_unstable_by_key(|&i| (std::cmp::Reverse(adj.of(i as usize).len()), i));
    let mut taken = vec![false; n];
    let mut groups = Vec::new();
    for s in seeds {
        if taken[s as usize] {
            continue;
        }
        taken[s as usize] = true;
        let mut members = vec![s];
        for &(j, _) in adj.of(s as usize) {
            if taken[j as usize] {
                continue;
            }
            if clique && !members[1..].iter().all(|&m| adj.paired(m, j)) {
                continue;
            }
            taken[j as usize] = true;
            members.push(j);
        }
        groups.push(Group {
            members,
            centre: (!clique).then_some(s),
        });
    }
    groups
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(a: u32, b: u32, d: f64) -> Pair {
        Pair { a, b, distance: d }
    }

    #[test]
    fn a_chain_is_one_component_but_not_one_centre_or_clique_group() {
        // 0–1–2–3 a chain (each step 1), 4 alone, 5–6 a pair.
        let pairs = [p(0, 1, 1.0), p(1, 2, 1.0), p(2, 3, 1.0), p(5, 6, 0.0)];
        let comps = group(7, &pairs, Grouping::Components, false);
        assert_eq!(comps.len(), 2);
        assert_eq!(comps[0].members, vec![0, 1, 2, 3]);
        assert_eq!(comps[1].members, vec![5, 6]);
        let with_single = group(7, &pairs, Grouping::Components, true);
        assert_eq!(with_single.len(), 3);
        assert_eq!(with_single[1].members, vec![4]);
        // Centre: 1 and 2 have two pairs each; 1 (smaller) is the first centre, takes 0, 2.
        let centre = group(7, &pairs, Grouping::Centre, false);
        assert_eq!(centre[0].members, vec![0, 1, 2]);
        assert_eq!(centre[0].centre, Some(1));
        assert_eq!(centre[1].members, vec![5, 6]);
        assert_eq!(centre.len(), 2, "3 is left alone: {centre:?}");
        // Clique: 1 takes 0, then 2 is not paired with 0.
        let clique = group(7, &pairs, Grouping::Clique, false);
        assert_eq!(clique[0].members, vec![0, 1]);
        assert_eq!(clique[1].members, vec![2, 3]);
        assert_eq!(clique[2].members, vec![5, 6]);
    }

    #[test]
    fn repeated_pairs_and_self_pairs_change_nothing() {
        let pairs = [p(0, 1, 1.0), p(1, 0, 1.0), p(2, 2, 0.0)];
        for how in [Grouping::Components, Grouping::Centre, Grouping::Clique] {
            let g = group(3, &pairs, how, false);
            assert_eq!(g.len(), 1, "{how:?}");
            assert_eq!(g[0].members, vec![0, 1]);
        }
    }
}
