//! Import circles: the strongly connected components of a directed graph (Tarjan 1972, "Depth-first
//! search and linear graph algorithms", SIAM J. Comput. 1(2)), and one concrete circle through each
//! component for the failure message.

use std::collections::{BTreeMap, BTreeSet, VecDeque};

/// Directed graph: node -> nodes it points to.
pub type Graph = BTreeMap<String, BTreeSet<String>>;

/// Components of more than one node, each sorted, in sorted order. A node that only points to
/// itself is not a circle between modules and is not reported.
pub fn circles(g: &Graph) -> Vec<Vec<String>> {
    let nodes: BTreeSet<&String> = g.keys().chain(g.values().flatten()).collect();
    let index_of: BTreeMap<&String, usize> =
        nodes.iter().enumerate().map(|(i, n)| (*n, i)).collect();
    let names: Vec<&String> = nodes.into_iter().collect();
    let succ: Vec<Vec<usize>> = names
        .iter()
        .map(|n| {
            g.get(*n)
                .map(|s| s.iter().map(|m| index_of[m]).collect())
                .unwrap_or_default()
        })
        .collect();
    // Iterative Tarjan, so that deep graphs cannot overflow the stack.
    let n = names.len();
    let mut index = vec![usize::MAX; n];
    let mut low = vec![0usize; n];
    let mut on_stack = vec![false; n];
    let mut stack: Vec<usize> = Vec::new();
    let mut next = 0usize;
    let mut out: Vec<Vec<String>> = Vec::new();
    for root in 0..n {
        if index[root] != usize::MAX {
            continue;
        }
        let mut work: Vec<(usize, usize)> = vec![(root, 0)];
        index[root] = next;
        low[root] = next;
        next += 1;
        stack.push(root);
        on_stack[root] = true;
        while let Some(&(v, k)) = work.last() {
            if k < succ[v].len() {
                let w = succ[v][k];
                if let Some(top) = work.last_mut() {
                    top.1 += 1;
                }
                if index[w] == usize::MAX {
                    index[w] = next;
                    low[w] = next;
                    next += 1;
                    stack.push(w);
                    on_stack[w] = true;
                    work.push((w, 0));
                } else if on_stack[w] {
                    low[v] = low[v].min(index[w]);
                }
            } else {
                work.pop();
                if let Some(&(parent, _)) = work.last() {
                    low[parent] = low[parent].min(low[v]);
                }
                if low[v] == index[v] {
                    let mut comp = Vec::new();
                    while let Some(w) = stack.pop() {
                        on_stack[w] = false;
                        comp.push(names[w].clone());
                        if w == v {
                            break;
                        }
                    }
                    if comp.len() > 1 {
                        comp.sort();
                        out.push(comp);
                    }
                }
            }
        }
    }
    out.sort();
    out
}

/// A shortest circle through the first node of `component`, staying inside it: `[a, b, ..., a]`.
pub fn circle_through(g: &Graph, component: &[String]) -> Vec<String> {
    let inside: BTreeSet<&String> = component.iter().collect();
    let start = &component[0];
    let mut parent: BTreeMap<&String, &String> = BTreeMap::new();
    let mut queue: VecDeque<&String> = VecDeque::from([start]);
    while let Some(v) = queue.pop_front() {
        for w in g.get(v).into_iter().flatten() {
            if !inside.contains(w) {
                continue;
            }
            if w == start {
                let mut path = vec![start.clone()];
                let mut at = v;
                while at != start {
                    path.push(at.clone());
                    at = parent[at];
                }
                path.push(start.clone());
                path.reverse();
                return path;
            }
            if !parent.contains_key(w) {
                parent.insert(w, v);
                queue.push_back(w);
            }
        }
    }
    Vec::new()
}

#[cfg(test)]
fn graph_of(edges: &[(&str, &str)]) -> Graph {
    let mut g = Graph::new();
    for (a, b) in edges {
        g.entry(a.to_string()).or_default().insert(b.to_string());
    }
    g
}

#[test]
fn finds_the_circles_of_a_hand_made_graph() {
    // a -> b -> c -> a is a circle; d -> e -> d another; f -> a and c -> g hang off them;
    // h points to itself only.
    let g = graph_of(&[
        ("a", "b"),
        ("b", "c"),
        ("c", "a"),
        ("c", "g"),
        ("f", "a"),
        ("d", "e"),
        ("e", "d"),
        ("h", "h"),
    ]);
    assert_eq!(
        circles(&g),
        vec![vec!["a", "b", "c"], vec!["d", "e"]]
            .into_iter()
            .map(|c| c.into_iter().map(String::from).collect::<Vec<_>>())
            .collect::<Vec<_>>()
    );
    assert_eq!(
        circle_through(&g, &["a".into(), "b".into(), "c".into()]),
        ["a", "b", "c", "a"]
    );
}

#[test]
fn a_graph_that_only_points_down_has_no_circle() {
    // A diamond: two paths from top to bottom, no way back up.
    let g = graph_of(&[("top", "l"), ("top", "r"), ("l", "bottom"), ("r", "bottom")]);
    assert!(circles(&g).is_empty());
    // Adding one upward edge closes a circle through all four.
    let mut g = g;
    g.entry("bottom".into()).or_default().insert("top".into());
    assert_eq!(circles(&g), vec![vec!["bottom", "l", "r", "top"]]);
}
