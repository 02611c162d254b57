//! Shortest-path distance on a weighted, undirected graph; items are node names.
//!
//! # The edge list
//!
//! One edge per line, `a b weight`, fields separated by spaces or tabs; node names are any
//! text without white space; blank lines and lines starting with `#` are ignored. Weights
//! are finite, non-negative decimal numbers; anything else is refused with the line. An edge
//! given twice keeps its smaller weight; `a a w` only declares the node.
//!
//! ```text
//! # Vessmark ferry legs, minutes
//! Orvane  Keth    25
//! Keth    Skarholm 40
//! Orvane  Skarholm 70
//! ```
//!
//! # Method
//!
//! [`Metric::prepare`] runs one single-source Dijkstra from the query node (binary heap,
//! O((V + E) log V)) and keeps the distances to every node, so each item then costs a look-up.
//! [`Graph::ball`] is the truncated form (only nodes within a bound), and
//! [`Graph::nearest_of`] a multi-source Dijkstra: every node's distance to the nearest of a
//! set of nodes, which is what distance-to-a-set coordinates need.
//!
//! # Parts that are not connected
//!
//! Between nodes of different connected components the true distance is +∞. Infinite
//! coordinates break an embedding: `|d(q,l) − d(x,l)|` is ∞ − ∞ = NaN for every landmark `l`
//! outside the component of `q` and `x`, and quantised coordinates saturate. The policy here
//! ([`Disconnected::Capped`], the default) reports instead one large finite distance,
//! `D = (sum of all edge weights) + 1`, larger than any path. It keeps the triangle
//! inequality: if `x` and `z` are connected, `d(x,z) ≤ W < D` whatever `y` is; if not, one of
//! `d(x,y)`, `d(y,z)` is `D` as well. Landmarks in other components then give every item of a
//! component the same coordinate `D`: the lower bound they give between two items of one
//! component is 0 (valid, but no help), so landmarks should be spread over components, and
//! the scale of quantised coordinates should be set from the finite distances, with `D`
//! saturating. [`Disconnected::Infinite`] reports +∞ for callers that want it. Names that are
//! not nodes of the graph are treated as isolated nodes.
//!
//! Zero weights are allowed and make a pseudometric (two nodes at distance 0).
//!
//! ```
//! use waymark::metric::{Graph, GraphMetric, Metric, PreparedQuery};
//!
//! let legs = "Orvane Keth 25\nKeth Skarholm 40\nOrvane Skarholm 70\nLille Holm 5\n";
//! let graph = Graph::parse(legs, "legs.txt")?;
//! let m = GraphMetric::new(graph);
//! let q = m.prepare(b"Orvane");
//! assert_eq!(q.distance(b"Skarholm"), 65.0);
//! assert_eq!(q.distance_within(b"Skarholm", 60.0), None);
//! assert_eq!(q.distance(b"Holm"), 141.0); // another component: sum of weights + 1
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use std::cmp::{Ordering, Reverse};
use std::collections::{BinaryHeap, HashMap};
use std::path::Path;
use std::sync::Arc;

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// An undirected graph with non-negative edge weights, in compressed adjacency form.
#[derive(Clone, Debug)]
pub struct Graph {
    names: Vec<Box<[u8]>>,
    index: HashMap<Box<[u8]>, u32>,
    /// `offsets[v]..offsets[v + 1]` indexes `adjacent` for node `v`.
    offsets: Vec<usize>,
    adjacent: Vec<(u32, f64)>,
    total_weight: f64,
}

/// What the distance between nodes of different components is.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Disconnected {
    /// The sum of all edge weights plus one (finite; keeps the triangle inequality).
    #[default]
    Capped,
    /// +∞.
    Infinite,
}

/// A heap entry ordered by distance (smallest first through `Reverse`).
#[derive(Clone, Copy, PartialEq)]
struct Entry(f64, u32);

impl Eq for Entry {}

impl PartialOrd for Entry {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}

impl Ord for Entry {
    fn cmp(&self, other: &Self) -> Ordering {
        self.0.total_cmp(&other.0).then(self.1.cmp(&other.1))
    }
}

impl Graph {
    /// Reads an edge list. A line that ends with a carriage return and no line feed (old
    /// Mac line ends) and invalid UTF-8 are refused, naming the file and line (and the
    /// CR's byte); CRLF line ends are read.
    pub fn from_path(path: &Path) -> Result<Graph, MetricError> {
        let name = path.display().to_string();
        let bytes = std::fs::read(path).map_err(|error| MetricError::Io {
            source_name: name.clone(),
            error,
        })?;
        Graph::parse(&super::side_file_text(bytes, &name)?, &name)
    }

    /// Parses the text of an edge list; `source_name` is used in errors.
    pub fn parse(text: &str, source_name: &str) -> Result<Graph, MetricError> {
        let mut names: Vec<Box<[u8]>> = Vec::new();
        let mut index: HashMap<Box<[u8]>, u32> = HashMap::new();
        let mut edges: HashMap<(u32, u32), f64> = HashMap::new();
        let mut node = |name: &str, names: &mut Vec<Box<[u8]>>| -> u32 {
            if let Some(&i) = index.get(name.as_bytes()) {
                return i;
            }
            let i = names.len() as u32;
            names.push(name.as_bytes().into());
            index.insert(name.as_bytes().into(), i);
            i
        };
        Graph::each_edge_line(text, source_name, |_, fa, fb, w| {
            let (a, b) = (node(fa, &mut names), node(fb, &mut names));
            if a != b {
                let slot = edges.entry((a.min(b), a.max(b))).or_insert(w);
                *slot = slot.min(w);
            }
        })?;
        if names.is_empty() {
            return Err(MetricError::Options(format!("{source_name}: no edges")));
        }
        Graph::assemble(names, index, edges, source_name)
    }

    /// Calls `f(line, a, b, weight)` for every edge line of the edge list `text` (1-based
    /// line; blank and `#` lines skipped; `a a w` lines included), in order; a malformed
    /// line is refused with its line, as [`Graph::parse`] refuses it.
    ///
    /// ```
    /// use waymark::metric::Graph;
    ///
    /// let mut legs = Vec::new();
    /// Graph::each_edge_line("# legs\nKeth Orvane 25\n\nOrvane Lille 7.5\n", "legs.txt", |l, a, b, w| {
    ///     legs.push((l, a.to_string(), b.to_string(), w))
    /// })?;
    /// assert_eq!(legs[1], (4, "Orvane".to_string(), "Lille".to_string(), 7.5));
    /// # Ok::<(), waymark::metric::MetricError>(())
    /// ```
    pub fn each_edge_line<'t>(
        text: &'t str,
        source_name: &str,
        mut f: impl FnMut(u64, &'t str, &'t str, f64),
    ) -> Result<(), MetricError> {
        let err = |line: usize, message: String| MetricError::Line {
            source_name: source_name.to_string(),
            line: line as u64 + 1,
            message,
        };
        let text = text.strip_prefix('\u{FEFF}').unwrap_or(text);
        for (i, raw) in text.lines().enumerate() {
            let t = raw.trim();
            if t.is_empty() || t.starts_with('#') {
                continue;
            }
            let fields: Vec<&str> = t.split_whitespace().collect();
            let [a, b, weight] = fields[..] else {
                return Err(err(
                    i,
                    format!("expected `NODE NODE WEIGHT`, found {} fields", fields.len()),
                ));
            };
            let w: f64 = weight
                .parse()
                .map_err(|_| err(i, format!("weight `{weight}` is not a number")))?;
            if !w.is_finite() || w < 0.0 {
                return Err(err(
                    i,
                    format!("weight {weight} must be finite and non-negative"),
                ));
            }
            f(i as u64 + 1, a, b, w);
        }
        Ok(())
    }

    /// The weight of the edge between nodes `a` and `b`, if there is one.
    pub fn weight(&self, a: u32, b: u32) -> Option<f64> {
        let a = a as usize;
        self.adjacent[self.offsets[a]..self.offsets[a + 1]]
            .iter()
            .find(|&&(u, _)| u == b)
            .map(|&(_, w)| w)
    }

    /// The edges of `more` that this graph has too, with a smaller weight: those
    /// [`Graph::union`] does not take. Each as (a, b, `more`'s weight, this graph's), by
    /// node names, `a` before `b` in `more`'s node order.
    pub fn longer_in<'m>(&self, more: &'m Graph) -> Vec<(&'m [u8], &'m [u8], f64, f64)> {
        let mut out = Vec::new();
        for v in 0..more.names.len() {
            let Some(a) = self.node(&more.names[v]) else {
                continue;
            };
            for &(u, w) in &more.adjacent[more.offsets[v]..more.offsets[v + 1]] {
                if u as usize <= v {
                    continue;
                }
                let name_u = more.name(u);
                if let Some(old) = self.node(name_u).and_then(|b| self.weight(a, b)) {
                    if w > old {
                        out.push((&*more.names[v], name_u, w, old));
                    }
                }
            }
        }
        out
    }

    /// The graph of `names` (numbered in order, `index` their look-up) and `edges` (keyed
    /// by the smaller node number first).
    fn assemble(
        names: Vec<Box<[u8]>>,
        index: HashMap<Box<[u8]>, u32>,
        edges: HashMap<(u32, u32), f64>,
        source_name: &str,
    ) -> Result<Graph, MetricError> {
        let mut degree = vec![0usize; names.len() + 1];
        for &(a, b) in edges.keys() {
            degree[a as usize + 1] += 1;
            degree[b as usize + 1] += 1;
        }
        for v in 1..degree.len() {
            degree[v] += degree[v - 1];
        }
        let offsets = degree.clone();
        let mut fill = degree;
        let mut adjacent = vec![(0u32, 0.0f64); offsets[names.len()]];
        let mut sorted: Vec<_> = edges.into_iter().collect();
        sorted.sort_by_key(|&(k, _)| k); // deterministic adjacency order
                                         // Summed in that order too, so that a graph read back gives the same value.
        let total_weight: f64 = sorted.iter().map(|&(_, w)| w).sum();
        if !total_weight.is_finite() {
            return Err(MetricError::Options(format!(
                "{source_name}: the sum of the weights overflows"
            )));
        }
        for ((a, b), w) in sorted {
            adjacent[fill[a as usize]] = (b, w);
            fill[a as usize] += 1;
            adjacent[fill[b as usize]] = (a, w);
            fill[b as usize] += 1;
        }
        Ok(Graph {
            names,
            index,
            offsets,
            adjacent,
            total_weight,
        })
    }

    /// The union of this graph and `more`: every node of either (this graph's nodes keep
    /// their numbers, `more`'s new nodes follow in its order) and every edge of either; an
    /// edge in both keeps the smaller weight, as an edge given twice in one edge list does.
    /// So no distance of this graph grows, and distances between its nodes shrink where
    /// `more` brings a shorter way. `source_name` names `more` in errors.
    ///
    /// ```
    /// use waymark::metric::Graph;
    ///
    /// let old = Graph::parse("Keth Orvane 25\nOrvane Lille 30\n", "legs.txt")?;
    /// let more = Graph::parse("Lille Brask 4\nBrask Keth 6\n", "more.txt")?;
    /// let both = old.union(&more, "more.txt")?;
    /// assert_eq!(both.len(), 4);
    /// assert_eq!(both.node(b"Brask"), Some(3));
    /// let keth = both.node(b"Keth").unwrap();
    /// let lille = both.node(b"Lille").unwrap() as usize;
    /// assert_eq!(both.distances_from(keth)[lille], 10.0); // was 55 through Orvane
    /// # Ok::<(), waymark::metric::MetricError>(())
    /// ```
    pub fn union(&self, more: &Graph, source_name: &str) -> Result<Graph, MetricError> {
        let mut names = self.names.clone();
        let mut index = self.index.clone();
        let mut edges: HashMap<(u32, u32), f64> = HashMap::with_capacity(self.adjacent.len());
        for v in 0..self.names.len() {
            for &(u, w) in &self.adjacent[self.offsets[v]..self.offsets[v + 1]] {
                if u as usize > v {
                    edges.insert((v as u32, u), w);
                }
            }
        }
        let number: Vec<u32> = more
            .names
            .iter()
            .map(|name| {
                *index.entry(name.clone()).or_insert_with(|| {
                    names.push(name.clone());
                    (names.len() - 1) as u32
                })
            })
            .collect();
        for v in 0..more.names.len() {
            for &(u, w) in &more.adjacent[more.offsets[v]..more.offsets[v + 1]] {
                if u as usize > v {
                    let (a, b) = (number[v], number[u as usize]);
                    let slot = edges.entry((a.min(b), a.max(b))).or_insert(w);
                    *slot = slot.min(w);
                }
            }
        }
        Graph::assemble(names, index, edges, source_name)
    }

    /// The graph as an edge list that [`Graph::parse`] reads back to the same graph, with
    /// the same node numbers: every node declared first (`a a 0`), in order, then each edge
    /// once. Weights are written in the shortest form that reads back to the same `f64`.
    ///
    /// ```
    /// use waymark::metric::Graph;
    ///
    /// let g = Graph::parse("Keth Orvane 25\nOrvane Lille 7.5\n", "legs.txt")?;
    /// let back = Graph::parse(&g.to_edge_list(), "again")?;
    /// assert_eq!(back.to_edge_list(), g.to_edge_list());
    /// assert_eq!(back.name(2), b"Lille");
    /// # Ok::<(), waymark::metric::MetricError>(())
    /// ```
    pub fn to_edge_list(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        let name = |v: usize| String::from_utf8_lossy(&self.names[v]);
        for v in 0..self.names.len() {
            let _ = writeln!(s, "{0} {0} 0", name(v));
        }
        for v in 0..self.names.len() {
            for &(u, w) in &self.adjacent[self.offsets[v]..self.offsets[v + 1]] {
                if u as usize > v {
                    let _ = writeln!(s, "{} {} {w}", name(v), name(u as usize));
                }
            }
        }
        s
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.names.len()
    }

    /// Number of edges (each counted once).
    pub fn edges(&self) -> usize {
        self.adjacent.len() / 2
    }

    /// Whether there are no nodes (never true for a parsed graph).
    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }

    /// The number of the node called `name`.
    pub fn node(&self, name: &[u8]) -> Option<u32> {
        self.index.get(name).copied()
    }

    /// The name of node `v`.
    pub fn name(&self, v: u32) -> &[u8] {
        &self.names[v as usize]
    }

    /// The distance reported between different components under [`Disconnected::Capped`].
    pub fn disconnected_distance(&self) -> f64 {
        self.total_weight + 1.0
    }

    /// Multi-source Dijkstra: every node's distance to the nearest of `sources`
    /// (+∞ where none is reachable), stopping at nodes farther than `bound`.
    fn run(&self, sources: &[u32], bound: f64) -> Vec<f64> {
        let mut dist = vec![f64::INFINITY; self.len()];
        let mut heap = BinaryHeap::new();
        for &s in sources {
            if (s as usize) < dist.len() && dist[s as usize] > 0.0 {
                dist[s as usize] = 0.0;
                heap.push(Reverse(Entry(0.0, s)));
            }
        }
        while let Some(Reverse(Entry(d, v))) = heap.pop() {
            if d > dist[v as usize] {
                continue;
            }
            let v = v as usize;
            for &(u, w) in &self.adjacent[self.offsets[v]..self.offsets[v + 1]] {
                let nd = d + w;
                if nd < dist[u as usize] && nd <= bound {
                    dist[u as usize] = nd;
                    heap.push(Reverse(Entry(nd, u)));
                }
            }
        }
        dist
    }

    /// Single-source Dijkstra: distances from `source` to every node (+∞ if unreachable).
    pub fn distances_from(&self, source: u32) -> Vec<f64> {
        self.run(&[source], f64::INFINITY)
    }

    /// Truncated Dijkstra: the nodes within `bound` of `source`, with their distances,
    /// nearest first.
    pub fn ball(&self, source: u32, bound: f64) -> Vec<(u32, f64)> {
        let d = self.run(&[source], bound);
        let mut v: Vec<(u32, f64)> = (0..self.len() as u32)
            .zip(d)
            .filter(|(_, d)| d.is_finite())
            .collect();
        v.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
        v
    }

    /// Multi-source Dijkstra: each node's distance to the nearest node of `sources`, +∞
    /// where none is reachable (distance-to-a-set coordinates; apply the
    /// [`Disconnected`] policy as [`GraphMetric`] does).
    pub fn nearest_of(&self, sources: &[u32]) -> Vec<f64> {
        self.run(sources, f64::INFINITY)
    }
}

/// Shortest-path distance between the nodes named by items.
#[derive(Clone, Debug)]
pub struct GraphMetric {
    graph: Arc<Graph>,
    policy: Disconnected,
}

/// A query prepared for [`GraphMetric`]: its distances to every node.
#[derive(Clone, Debug)]
pub struct GraphQuery {
    graph: Arc<Graph>,
    query: Vec<u8>,
    dist: Vec<f64>,
    far: f64,
}

impl GraphMetric {
    /// The metric on `graph` with the default policy ([`Disconnected::Capped`]).
    pub fn new(graph: Graph) -> Self {
        Self::with_policy(graph, Disconnected::Capped)
    }

    /// The metric with a chosen policy for nodes in different components.
    pub fn with_policy(graph: Graph, policy: Disconnected) -> Self {
        GraphMetric {
            graph: Arc::new(graph),
            policy,
        }
    }

    /// The graph.
    pub fn graph(&self) -> &Graph {
        &self.graph
    }

    fn far(&self) -> f64 {
        match self.policy {
            Disconnected::Capped => self.graph.disconnected_distance(),
            Disconnected::Infinite => f64::INFINITY,
        }
    }
}

impl Metric for GraphMetric {
    type Prepared = GraphQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Graph
    }

    fn prepare(&self, query: &[u8]) -> GraphQuery {
        let dist = match self.graph.node(query) {
            Some(v) => self.graph.distances_from(v),
            None => Vec::new(),
        };
        GraphQuery {
            graph: self.graph.clone(),
            query: query.to_vec(),
            dist,
            far: self.far(),
        }
    }

    /// One pair: one Dijkstra from `a`. Prefer [`Metric::prepare`] for many items.
    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        if a == b {
            return 0.0;
        }
        match (self.graph.node(a), self.graph.node(b)) {
            (Some(x), Some(y)) => {
                let d = self.graph.distances_from(x)[y as usize];
                if d.is_finite() {
                    d
                } else {
                    self.far()
                }
            }
            _ => self.far(),
        }
    }
}

impl PreparedQuery for GraphQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        if item == self.query.as_slice() {
            return 0.0;
        }
        match self
            .graph
            .node(item)
            .and_then(|v| self.dist.get(v as usize))
        {
            Some(d) if d.is_finite() => *d,
            _ => self.far,
        }
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        let d = self.distance(item);
        (d <= bound).then_some(d)
    }
}
