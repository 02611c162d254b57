//! Shortest-path distances against petgraph's `dijkstra` (a general-purpose graph crate),
//! the metric axioms on random graphs, and the edge-list checks.

use petgraph::graph::{NodeIndex, UnGraph};
use proptest::prelude::*;
use waymark::metric::{Disconnected, Graph, GraphMetric, Metric, MetricError, PreparedQuery};

/// Random edge lists over nodes n0..n{n-1}: sparse enough to leave some parts unconnected.
fn edges() -> impl Strategy<Value = (usize, Vec<(usize, usize, u32)>)> {
    (2usize..30).prop_flat_map(|n| {
        (
            Just(n),
            prop::collection::vec((0..n, 0..n, 1u32..100), 1..40),
        )
    })
}

fn text(edges: &[(usize, usize, u32)]) -> String {
    edges
        .iter()
        .map(|(a, b, w)| format!("n{a} n{b} {}\n", f64::from(*w) / 4.0))
        .collect()
}

proptest! {
    #[test]
    fn matches_petgraph((n, e) in edges()) {
        let graph = Graph::parse(&text(&e), "random.edges").unwrap();
        let m = GraphMetric::new(graph);
        let far = m.graph().disconnected_distance();
        // Outside reference: petgraph::algo::dijkstra on the same edges.
        let mut pg = UnGraph::<(), f64>::new_undirected();
        let nodes: Vec<NodeIndex> = (0..n).map(|_| pg.add_node(())).collect();
        for &(a, b, w) in &e {
            pg.add_edge(nodes[a], nodes[b], f64::from(w) / 4.0);
        }
        for s in 0..n {
            let reference = petgraph::algo::dijkstra(&pg, nodes[s], None, |x| *x.weight());
            let q = m.prepare(format!("n{s}").as_bytes());
            for (t, nt) in nodes.iter().enumerate() {
                let expected = if s == t { 0.0 } else { reference.get(nt).copied().unwrap_or(far) };
                prop_assert_eq!(q.distance(format!("n{t}").as_bytes()), expected, "n{} n{}", s, t);
            }
        }
    }

    #[test]
    fn metric_axioms((n, e) in edges(), x in 0usize..30, y in 0usize..30, z in 0usize..30) {
        let m = GraphMetric::new(Graph::parse(&text(&e), "random.edges").unwrap());
        // Names past n are not in the graph: isolated nodes under the policy.
        let (x, y, z) = (format!("n{}", x % (n + 2)), format!("n{}", y % (n + 2)), format!("n{}", z % (n + 2)));
        let d = |a: &str, b: &str| m.distance(a.as_bytes(), b.as_bytes());
        prop_assert_eq!(d(&x, &x), 0.0);
        prop_assert_eq!(d(&x, &y), d(&y, &x));
        if x != y { prop_assert!(d(&x, &y) > 0.0); }
        prop_assert!(d(&x, &z) <= d(&x, &y) + d(&y, &z) + 1e-9);
    }

    #[test]
    fn multi_source_is_the_nearest_single_source((_, e) in edges(), picks in prop::collection::vec(0usize..30, 1..4)) {
        let g = Graph::parse(&text(&e), "random.edges").unwrap();
        let sources: Vec<u32> = picks.iter().map(|&p| (p % g.len()) as u32).collect();
        let nearest = g.nearest_of(&sources);
        let single: Vec<Vec<f64>> = sources.iter().map(|&s| g.distances_from(s)).collect();
        for v in 0..g.len() {
            let expected = single.iter().map(|d| d[v]).fold(f64::INFINITY, f64::min);
            prop_assert_eq!(nearest[v], expected);
        }
        let ball = g.ball(sources[0], 10.0);
        for (v, d) in &ball {
            prop_assert!(*d <= 10.0);
            prop_assert_eq!(*d, single[0][*v as usize]);
        }
        prop_assert_eq!(ball.len(), single[0].iter().filter(|d| **d <= 10.0).count());
    }
}

#[test]
fn ferry_legs_and_policy() {
    let legs = "# Vessmark ferry legs, minutes\nOrvane Keth 25\nKeth Skarholm 40\nOrvane Skarholm 70\nOrvane Keth 30\nLille Holm 5\n";
    let g = Graph::parse(legs, "legs.txt").unwrap();
    assert_eq!(g.len(), 5);
    assert_eq!(g.disconnected_distance(), 141.0);
    let capped = GraphMetric::new(g.clone());
    assert_eq!(capped.distance(b"Orvane", b"Skarholm"), 65.0);
    assert_eq!(capped.distance(b"Keth", b"Holm"), 141.0);
    assert_eq!(capped.distance(b"Keth", b"Atlantis"), 141.0);
    let inf = GraphMetric::with_policy(g, Disconnected::Infinite);
    assert_eq!(inf.distance(b"Keth", b"Holm"), f64::INFINITY);
    assert_eq!(
        inf.prepare(b"Orvane").distance_within(b"Keth", 25.0),
        Some(25.0)
    );
}

#[test]
fn bad_edge_lists_name_the_line() {
    for (text, line, what) in [
        ("a b 1\nb c -2\n", 2, "non-negative"),
        ("a b 1\nb c two\n", 2, "not a number"),
        ("a b inf\n", 1, "finite"),
        ("a b NaN\n", 1, "finite"),
        ("a b\n", 1, "expected `NODE NODE WEIGHT`"),
    ] {
        match Graph::parse(text, "legs.txt") {
            Err(e @ MetricError::Line { line: l, .. }) => {
                assert_eq!(l, line, "{text:?}");
                assert!(
                    e.to_string().starts_with(&format!("legs.txt:{line}: ")),
                    "{e}"
                );
                assert!(e.to_string().contains(what), "{e}");
            }
            other => panic!("{text:?}: {other:?}"),
        }
    }
    assert!(Graph::parse("# nothing\n", "legs.txt").is_err());
}
