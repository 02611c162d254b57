//! Published metric-index methods, for comparison in the benches only (not in the product):
//! a BK-tree (Burkhard & Keller 1973), a vantage-point tree (Yianilos 1993), and the
//! deletion-neighbourhood method for small radii (Bocek, Hunt & Stiller 2007). All use
//! waymark's own Levenshtein kernel ([`LevenshteinQuery`], the bounded form where the method
//! allows), so that only the method differs.
//!
//! The trees answer k-NN queries best-first (smallest lower bound first, the radius shrinking
//! to the running k-th distance) and range queries; a `budget` of distance computations per
//! query turns the k-NN search into an approximate one (the best k found when it runs out).
#![allow(dead_code)] // each bench uses a part

use std::cmp::Reverse;
use std::collections::{BinaryHeap, HashMap};
use std::hash::{BuildHasherDefault, Hasher};

use rand::{Rng, SeedableRng};
use rayon::prelude::*;
use waymark::metric::LevenshteinQuery;

/// One answer: `(item, distance)` sorted by distance then item, and the distances computed.
#[derive(Clone, Debug, Default)]
pub struct Answer {
    pub hits: Vec<(u32, u32)>,
    pub computed: usize,
}

/// `dist_within` that also takes "no bound".
#[inline]
fn within(q: &LevenshteinQuery, item: &[u8], bound: u32) -> Option<u32> {
    if bound == u32::MAX {
        Some(q.dist(item))
    } else {
        q.dist_within(item, bound)
    }
}

/// The k best `(distance, item)` seen so far (a max-heap), and the radius they allow.
struct Best {
    k: usize,
    heap: BinaryHeap<(u32, u32)>,
}

impl Best {
    fn new(k: usize) -> Self {
        Best {
            k,
            heap: BinaryHeap::with_capacity(k + 1),
        }
    }

    /// The largest distance an item may have to enter (ties kept: items are ordered by
    /// (distance, index), so an item at the k-th distance with a lower index still enters).
    fn radius(&self) -> u32 {
        if self.heap.len() < self.k {
            u32::MAX
        } else {
            self.heap.peek().map_or(u32::MAX, |&(d, _)| d)
        }
    }

    fn offer(&mut self, item: u32, d: u32) {
        if self.heap.len() < self.k {
            self.heap.push((d, item));
        } else if let Some(&top) = self.heap.peek() {
            if (d, item) < top {
                self.heap.pop();
                self.heap.push((d, item));
            }
        }
    }

    fn into_hits(self) -> Vec<(u32, u32)> {
        let mut v: Vec<(u32, u32)> = self.heap.into_iter().map(|(d, i)| (i, d)).collect();
        v.sort_unstable_by_key(|&(i, d)| (d, i));
        v
    }
}

// ---------------------------------------------------------------------------------------
// BK-tree

/// A BK-tree: every child subtree holds the items at one distance (its edge) from the node.
pub struct BkTree<'a> {
    words: &'a [&'a [u8]],
    /// Item of each node; node 0 is the root.
    item: Vec<u32>,
    /// Children of node `v`: `child_edge/child_node[first[v]..first[v + 1]]`, by edge.
    first: Vec<u32>,
    child_edge: Vec<u32>,
    child_node: Vec<u32>,
    /// Largest child edge of each node (0 for a leaf).
    max_edge: Vec<u32>,
    /// Distances computed while building.
    pub build_computed: usize,
}

impl<'a> BkTree<'a> {
    /// Inserts the words in list order.
    pub fn build(words: &'a [&'a [u8]]) -> Self {
        let n = words.len();
        let mut children: Vec<Vec<(u32, u32)>> = Vec::with_capacity(n);
        let mut item: Vec<u32> = Vec::with_capacity(n);
        let mut computed = 0usize;
        if n > 0 {
            item.push(0);
            children.push(Vec::new());
        }
        for (i, w) in words.iter().enumerate().skip(1) {
            let q = LevenshteinQuery::new(w);
            let mut v = 0usize;
            loop {
                let d = q.dist(words[item[v] as usize]);
                computed += 1;
                match children[v].iter().find(|&&(e, _)| e == d) {
                    Some(&(_, c)) => v = c as usize,
                    None => {
                        let c = item.len() as u32;
                        item.push(i as u32);
                        children.push(Vec::new());
                        children[v].push((d, c));
                        break;
                    }
                }
            }
        }
        let mut first = Vec::with_capacity(item.len() + 1);
        let mut child_edge = Vec::with_capacity(item.len());
        let mut child_node = Vec::with_capacity(item.len());
        let mut max_edge = Vec::with_capacity(item.len());
        for ch in &mut children {
            ch.sort_unstable();
            first.push(child_edge.len() as u32);
            max_edge.push(ch.last().map_or(0, |&(e, _)| e));
            for &(e, c) in ch.iter() {
                child_edge.push(e);
                child_node.push(c);
            }
        }
        first.push(child_edge.len() as u32);
        BkTree {
            words,
            item,
            first,
            child_edge,
            child_node,
            max_edge,
            build_computed: computed,
        }
    }

    /// Bytes of the tree's arrays (the words themselves not counted).
    pub fn bytes(&self) -> usize {
        4 * (self.item.len()
            + self.first.len()
            + self.child_edge.len()
            + self.child_node.len()
            + self.max_edge.len())
    }

    fn children(&self, v: usize) -> impl Iterator<Item = (u32, usize)> + '_ {
        let r = self.first[v] as usize..self.first[v + 1] as usize;
        self.child_edge[r.clone()]
            .iter()
            .copied()
            .zip(self.child_node[r].iter().map(|&c| c as usize))
    }

    /// The k nearest items, best-first; at most `budget` distances computed (`usize::MAX`:
    /// exact).
    pub fn knn(&self, query: &[u8], k: usize, budget: usize) -> Answer {
        let q = LevenshteinQuery::new(query);
        let mut best = Best::new(k);
        let mut computed = 0usize;
        // Min-heap of (lower bound, node).
        let mut heap: BinaryHeap<Reverse<(u32, u32)>> = BinaryHeap::new();
        if !self.item.is_empty() {
            heap.push(Reverse((0, 0)));
        }
        while let Some(Reverse((lb, v))) = heap.pop() {
            let r = best.radius();
            if lb > r || computed >= budget {
                break;
            }
            let v = v as usize;
            let item = self.item[v];
            // d is needed exactly only up to r + the largest child edge: past that, neither
            // the node nor any child can hold an answer.
            let bound = r.saturating_add(self.max_edge[v]);
            computed += 1;
            let Some(d) = within(&q, self.words[item as usize], bound) else {
                continue;
            };
            if d <= r {
                best.offer(item, d);
            }
            let r = best.radius();
            for (e, c) in self.children(v) {
                let clb = lb.max(e.abs_diff(d));
                if clb <= r {
                    heap.push(Reverse((clb, c as u32)));
                }
            }
        }
        Answer {
            hits: best.into_hits(),
            computed,
        }
    }

    /// Every item within `radius`.
    pub fn range(&self, query: &[u8], radius: u32) -> Answer {
        let q = LevenshteinQuery::new(query);
        let mut hits = Vec::new();
        let mut computed = 0usize;
        let mut stack = Vec::new();
        if !self.item.is_empty() {
            stack.push(0usize);
        }
        while let Some(v) = stack.pop() {
            let item = self.item[v];
            computed += 1;
            let Some(d) = within(&q, self.words[item as usize], radius + self.max_edge[v]) else {
                continue;
            };
            if d <= radius {
                hits.push((item, d));
            }
            for (e, c) in self.children(v) {
                if e.abs_diff(d) <= radius {
                    stack.push(c);
                }
            }
        }
        hits.sort_unstable_by_key(|&(i, d)| (d, i));
        Answer { hits, computed }
    }
}

// ---------------------------------------------------------------------------------------
// Vantage-point tree

const VP_LEAF: usize = 16;

enum VpNode {
    /// Vantage point, median distance `mu`; `inside` holds items at distance ≤ mu, `outside`
    /// those beyond.
    Split {
        vp: u32,
        mu: u32,
        inside: u32,
        outside: u32,
    },
    /// Items `leaf_items[start..end]`.
    Leaf { start: u32, end: u32 },
}

/// A vantage-point tree with random vantage points (fixed seed), median splits and buckets of
/// up to 16 items.
pub struct VpTree<'a> {
    words: &'a [&'a [u8]],
    nodes: Vec<VpNode>,
    leaf_items: Vec<u32>,
    pub build_computed: usize,
}

impl<'a> VpTree<'a> {
    pub fn build(words: &'a [&'a [u8]], seed: u64) -> Self {
        let mut t = VpTree {
            words,
            nodes: Vec::new(),
            leaf_items: Vec::new(),
            build_computed: 0,
        };
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let mut items: Vec<u32> = (0..words.len() as u32).collect();
        if !items.is_empty() {
            t.split(&mut items, &mut rng);
        }
        t
    }

    /// Builds the subtree of `items` and returns its node number.
    fn split(&mut self, items: &mut [u32], rng: &mut rand_chacha::ChaCha8Rng) -> u32 {
        let at = self.nodes.len() as u32;
        if items.len() <= VP_LEAF {
            let start = self.leaf_items.len() as u32;
            self.leaf_items.extend_from_slice(items);
            self.nodes.push(VpNode::Leaf {
                start,
                end: self.leaf_items.len() as u32,
            });
            return at;
        }
        let pick = rng.gen_range(0..items.len());
        items.swap(0, pick);
        let vp = items[0];
        let rest = &mut items[1..];
        let q = LevenshteinQuery::new(self.words[vp as usize]);
        let mut keyed: Vec<(u32, u32)> = rest
            .par_iter()
            .map(|&i| (q.dist(self.words[i as usize]), i))
            .collect();
        self.build_computed += keyed.len();
        keyed.sort_unstable();
        let mu = keyed[(keyed.len() - 1) / 2].0;
        let cut = keyed.partition_point(|&(d, _)| d <= mu);
        for (slot, &(_, i)) in rest.iter_mut().zip(&keyed) {
            *slot = i;
        }
        self.nodes.push(VpNode::Split {
            vp,
            mu,
            inside: 0,
            outside: 0,
        });
        let (ins, outs) = rest.split_at_mut(cut);
        let inside = self.split(ins, rng);
        let outside = self.split(outs, rng);
        if let VpNode::Split {
            inside: a,
            outside: b,
            ..
        } = &mut self.nodes[at as usize]
        {
            *a = inside;
            *b = outside;
        }
        at
    }

    /// Bytes of the tree's arrays (the words themselves not counted).
    pub fn bytes(&self) -> usize {
        self.nodes.len() * std::mem::size_of::<VpNode>() + 4 * self.leaf_items.len()
    }

    /// The k nearest items, best-first; at most `budget` distances computed (`usize::MAX`:
    /// exact).
    pub fn knn(&self, query: &[u8], k: usize, budget: usize) -> Answer {
        let q = LevenshteinQuery::new(query);
        let mut best = Best::new(k);
        let mut computed = 0usize;
        let mut heap: BinaryHeap<Reverse<(u32, u32)>> = BinaryHeap::new();
        if !self.nodes.is_empty() {
            heap.push(Reverse((0, 0)));
        }
        'outer: while let Some(Reverse((lb, v))) = heap.pop() {
            if lb > best.radius() || computed >= budget {
                break;
            }
            match self.nodes[v as usize] {
                VpNode::Leaf { start, end } => {
                    for &i in &self.leaf_items[start as usize..end as usize] {
                        if computed >= budget {
                            break 'outer;
                        }
                        computed += 1;
                        if let Some(d) = within(&q, self.words[i as usize], best.radius()) {
                            best.offer(i, d);
                        }
                    }
                }
                VpNode::Split {
                    vp,
                    mu,
                    inside,
                    outside,
                } => {
                    let r = best.radius();
                    computed += 1;
                    match within(&q, self.words[vp as usize], mu.saturating_add(r)) {
                        // d > mu + r: nothing inside can be within r, nor the vantage point.
                        None => heap.push(Reverse((lb, outside))),
                        Some(d) => {
                            best.offer_if(vp, d);
                            let r = best.radius();
                            let lin = lb.max(d.saturating_sub(mu));
                            let lout = lb.max((mu + 1).saturating_sub(d));
                            if lin <= r {
                                heap.push(Reverse((lin, inside)));
                            }
                            if lout <= r {
                                heap.push(Reverse((lout, outside)));
                            }
                        }
                    }
                }
            }
        }
        Answer {
            hits: best.into_hits(),
            computed,
        }
    }

    /// Every item within `radius`.
    pub fn range(&self, query: &[u8], radius: u32) -> Answer {
        let q = LevenshteinQuery::new(query);
        let mut hits = Vec::new();
        let mut computed = 0usize;
        let mut stack = Vec::new();
        if !self.nodes.is_empty() {
            stack.push(0u32);
        }
        while let Some(v) = stack.pop() {
            match self.nodes[v as usize] {
                VpNode::Leaf { start, end } => {
                    for &i in &self.leaf_items[start as usize..end as usize] {
                        computed += 1;
                        if let Some(d) = q.dist_within(self.words[i as usize], radius) {
                            hits.push((i, d));
                        }
                    }
                }
                VpNode::Split {
                    vp,
                    mu,
                    inside,
                    outside,
                } => {
                    computed += 1;
                    match q.dist_within(self.words[vp as usize], mu + radius) {
                        None => stack.push(outside),
                        Some(d) => {
                            if d <= radius {
                                hits.push((vp, d));
                            }
                            if d <= mu + radius {
                                stack.push(inside);
                            }
                            if d + radius > mu {
                                stack.push(outside);
                            }
                        }
                    }
                }
            }
        }
        hits.sort_unstable_by_key(|&(i, d)| (d, i));
        Answer { hits, computed }
    }
}

impl Best {
    /// Offers the item only if it is within the current radius.
    fn offer_if(&mut self, item: u32, d: u32) {
        if d <= self.radius() {
            self.offer(item, d);
        }
    }
}

// ---------------------------------------------------------------------------------------
// Deletion neighbourhood

/// Hasher for keys that are already 64-bit hashes.
#[derive(Default)]
pub struct Passthrough(u64);

impl Hasher for Passthrough {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, _: &[u8]) {
        unreachable!("only u64 keys")
    }
    fn write_u64(&mut self, v: u64) {
        self.0 = v;
    }
}

/// A 64-bit hash of a char sequence (multiply–rotate per char, then a 64-bit finaliser).
/// Two variants with one hash only add a candidate, which the true distance then rejects.
fn hash_chars(chars: impl Iterator<Item = char>) -> u64 {
    let mut h: u64 = 0x9e37_79b9_7f4a_7c15;
    let mut len = 0u64;
    for c in chars {
        h = (h.rotate_left(5) ^ u64::from(c as u32)).wrapping_mul(0x517c_c1b7_2722_0a95);
        len += 1;
    }
    h ^= len;
    // splitmix64's finaliser
    h ^= h >> 30;
    h = h.wrapping_mul(0xbf58_476d_1ce4_e5b9);
    h ^= h >> 27;
    h = h.wrapping_mul(0x94d0_49bb_1331_11eb);
    h ^ (h >> 31)
}

/// Hashes of every string made from `chars` by deleting at most `r` chars (distinct).
fn deletion_hashes(chars: &[char], r: u32, out: &mut Vec<u64>) {
    out.clear();
    fn go(chars: &[char], from: usize, left: u32, deleted: &mut Vec<usize>, out: &mut Vec<u64>) {
        out.push(hash_chars(
            chars
                .iter()
                .enumerate()
                .filter(|(i, _)| !deleted.contains(i))
                .map(|(_, &c)| c),
        ));
        if left == 0 {
            return;
        }
        for at in from..chars.len() {
            deleted.push(at);
            go(chars, at + 1, left - 1, deleted, out);
            deleted.pop();
        }
    }
    go(chars, 0, r, &mut Vec::with_capacity(r as usize), out);
    out.sort_unstable();
    out.dedup();
}

fn chars_of(w: &[u8]) -> Vec<char> {
    String::from_utf8_lossy(w).chars().collect()
}

/// The deletion-neighbourhood index of radius `r`: every variant of every word with at most
/// `r` chars deleted, in a hash map from the variant's hash to the words that have it.
pub struct DeletionIndex<'a> {
    words: &'a [&'a [u8]],
    r: u32,
    map: HashMap<u64, (u32, u32), BuildHasherDefault<Passthrough>>,
    ids: Vec<u32>,
    /// (variant, word) pairs before merging.
    pub entries: usize,
}

impl<'a> DeletionIndex<'a> {
    pub fn build(words: &'a [&'a [u8]], r: u32) -> Self {
        let mut pairs: Vec<(u64, u32)> = words
            .par_iter()
            .enumerate()
            .fold(
                || (Vec::new(), Vec::new()),
                |(mut acc, mut buf): (Vec<(u64, u32)>, Vec<u64>), (i, w)| {
                    deletion_hashes(&chars_of(w), r, &mut buf);
                    acc.extend(buf.iter().map(|&h| (h, i as u32)));
                    (acc, buf)
                },
            )
            .map(|(acc, _)| acc)
            .reduce(Vec::new, |mut a, mut b| {
                a.append(&mut b);
                a
            });
        pairs.par_sort_unstable();
        let entries = pairs.len();
        let mut map: HashMap<u64, (u32, u32), BuildHasherDefault<Passthrough>> = HashMap::default();
        let mut ids = Vec::with_capacity(pairs.len());
        let mut at = 0;
        while at < pairs.len() {
            let h = pairs[at].0;
            let start = ids.len() as u32;
            while at < pairs.len() && pairs[at].0 == h {
                ids.push(pairs[at].1);
                at += 1;
            }
            map.insert(h, (start, ids.len() as u32 - start));
        }
        map.shrink_to_fit();
        DeletionIndex {
            words,
            r,
            map,
            ids,
            entries,
        }
    }

    /// Distinct variants (keys of the map).
    pub fn keys(&self) -> usize {
        self.map.len()
    }

    /// Bytes of the map: its slots (key, value and one control byte each) and the id lists.
    pub fn bytes(&self) -> usize {
        self.map.capacity() * (std::mem::size_of::<(u64, (u32, u32))>() + 1) + 4 * self.ids.len()
    }

    /// Every word within `radius` (at most the index's radius).
    pub fn range(&self, query: &[u8], radius: u32) -> Answer {
        assert!(radius <= self.r, "radius above the index's");
        let q = LevenshteinQuery::new(query);
        let mut hashes = Vec::new();
        deletion_hashes(&chars_of(query), radius, &mut hashes);
        let mut cand: Vec<u32> = Vec::new();
        for h in &hashes {
            if let Some(&(s, l)) = self.map.get(h) {
                cand.extend_from_slice(&self.ids[s as usize..(s + l) as usize]);
            }
        }
        cand.sort_unstable();
        cand.dedup();
        let mut hits: Vec<(u32, u32)> = cand
            .iter()
            .filter_map(|&i| {
                q.dist_within(self.words[i as usize], radius)
                    .map(|d| (i, d))
            })
            .collect();
        hits.sort_unstable_by_key(|&(i, d)| (d, i));
        Answer {
            hits,
            computed: cand.len(),
        }
    }
}
