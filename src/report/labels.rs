//! Placing point labels on a map so that they overlap neither each other nor the symbols.
//!
//! A greedy placement over a fixed set of candidate positions around each point, tried in order
//! of preference (first to the upper right, then the other sides, then farther out with a leader
//! line), the point-feature label placement of Imhof (1975, "Positioning names on maps", The
//! American Cartographer 2(2)) as automated by Christensen, Marks & Shieber (1995, "An empirical
//! study of algorithms for point-feature label placement", ACM Transactions on Graphics 14(3)),
//! whose greedy variant this is. A label that fits nowhere is left out and counted, never drawn
//! over another.

/// An axis-aligned box in pixels: `[x0, x1) x [y0, y1)`, `y` growing downwards.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rect {
    /// Left edge.
    pub x0: f64,
    /// Top edge.
    pub y0: f64,
    /// Right edge (exclusive).
    pub x1: f64,
    /// Bottom edge (exclusive).
    pub y1: f64,
}

impl Rect {
    /// The box of size `w x h` whose top-left corner is `(x, y)`.
    pub fn at(x: f64, y: f64, w: f64, h: f64) -> Rect {
        Rect {
            x0: x,
            y0: y,
            x1: x + w,
            y1: y + h,
        }
    }

    /// The square of half-side `r` centred on `(x, y)`.
    pub fn around(x: f64, y: f64, r: f64) -> Rect {
        Rect {
            x0: x - r,
            y0: y - r,
            x1: x + r,
            y1: y + r,
        }
    }

    /// True when the two boxes share some area.
    pub fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }

    /// True when `self` lies entirely inside `o`.
    pub fn inside(&self, o: &Rect) -> bool {
        self.x0 >= o.x0 && self.y0 >= o.y0 && self.x1 <= o.x1 && self.y1 <= o.y1
    }
}

/// One label to place: the point it names, the half-size of its symbol and the label's size.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LabelRequest {
    /// Point (symbol centre), pixels.
    pub x: f64,
    /// Point, pixels.
    pub y: f64,
    /// Half-side of the box the symbol occupies.
    pub symbol: f64,
    /// Label width, pixels (padding included).
    pub w: f64,
    /// Label height, pixels (padding included).
    pub h: f64,
}

/// Where a label went.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Placed {
    /// The label's box.
    pub rect: Rect,
    /// True when the label stands away from its point and needs a leader line.
    pub leader: bool,
}

/// Candidate top-left corners of a `w x h` label around a point at `(x, y)` whose symbol has
/// half-side `r`, nearest first, in order of preference: upper right, right, lower right, upper
/// left, left, lower left, above, below; then the same eight twice as far out.
fn candidates(q: &LabelRequest, gap: f64) -> Vec<((f64, f64), bool)> {
    let (x, y, w, h) = (q.x, q.y, q.w, q.h);
    let mut out = Vec::with_capacity(16);
    for (ring, leader) in [(1.0, false), (2.6, true)] {
        let g = (q.symbol + gap) * ring;
        for (cx, cy) in [
            (x + g, y - g - h * 0.6),
            (x + g, y - h / 2.0),
            (x + g, y + g - h * 0.4),
            (x - g - w, y - g - h * 0.6),
            (x - g - w, y - h / 2.0),
            (x - g - w, y + g - h * 0.4),
            (x - w / 2.0, y - g - h),
            (x - w / 2.0, y + g),
        ] {
            out.push(((cx, cy), leader));
        }
    }
    out
}

/// Places labels one after the other, in the order given, inside `frame`, avoiding `obstacles`
/// (symbols, scale bar, north arrow: every symbol of `requests` is added to them) and the labels
/// already placed. Returns one entry per request: `None` when no candidate position was free.
pub fn place(
    requests: &[LabelRequest],
    obstacles: &[Rect],
    frame: Rect,
    gap: f64,
) -> Vec<Option<Placed>> {
    let mut taken: Vec<Rect> = obstacles.to_vec();
    taken.extend(requests.iter().map(|q| Rect::around(q.x, q.y, q.symbol)));
    let mut out = Vec::with_capacity(requests.len());
    for q in requests {
        let mut chosen = None;
        for ((cx, cy), leader) in candidates(q, gap) {
            let r = Rect::at(cx, cy, q.w, q.h);
            if r.inside(&frame) && !taken.iter().any(|t| t.overlaps(&r)) {
                chosen = Some(Placed { rect: r, leader });
                taken.push(r);
                break;
            }
        }
        out.push(chosen);
    }
    out
}

/// The longest prefix that every name shares, cut back to end at a separator (`-`, `_`, space
/// or `/`), when at least two names share it and every name keeps something after it; empty
/// otherwise. Labels may leave it out when the map says so.
pub fn common_prefix(names: &[&str]) -> String {
    if names.len() < 2 {
        return String::new();
    }
    let first = names[0];
    let mut end = first.len();
    for n in &names[1..] {
        end = end.min(
            first
                .char_indices()
                .zip(n.chars())
                .take_while(|((_, a), b)| a == b)
                .map(|((k, a), _)| k + a.len_utf8())
                .last()
                .unwrap_or(0),
        );
    }
    let cut = first[..end]
        .char_indices()
        .filter(|(_, c)| matches!(c, '-' | '_' | ' ' | '/'))
        .map(|(k, c)| k + c.len_utf8())
        .next_back()
        .unwrap_or(0);
    if cut == 0 || names.iter().any(|n| n.len() <= cut) {
        String::new()
    } else {
        first[..cut].to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_never_overlap_and_stay_in_the_frame() {
        // A tight cluster: four points 6 px apart must not get overlapping labels.
        let frame = Rect::at(0.0, 0.0, 300.0, 200.0);
        let req: Vec<LabelRequest> = (0..4)
            .map(|k| LabelRequest {
                x: 150.0 + 6.0 * k as f64,
                y: 100.0,
                symbol: 4.0,
                w: 40.0,
                h: 14.0,
            })
            .collect();
        let placed = place(&req, &[], frame, 3.0);
        let boxes: Vec<Rect> = placed.iter().flatten().map(|p| p.rect).collect();
        assert_eq!(boxes.len(), 4, "room enough for all four");
        for (a, ra) in boxes.iter().enumerate() {
            assert!(ra.inside(&frame));
            for rb in &boxes[a + 1..] {
                assert!(!ra.overlaps(rb), "{ra:?} overlaps {rb:?}");
            }
            for q in &req {
                assert!(
                    !ra.overlaps(&Rect::around(q.x, q.y, q.symbol)),
                    "label over a symbol"
                );
            }
        }
        // A point alone takes the preferred spot: to the upper right, without a leader.
        let one = place(&req[..1], &[], frame, 3.0)[0].unwrap();
        assert!(!one.leader);
        assert!(one.rect.x0 > req[0].x && one.rect.y1 < req[0].y, "{one:?}");
    }

    #[test]
    fn a_label_with_no_room_is_left_out() {
        let frame = Rect::at(0.0, 0.0, 30.0, 30.0);
        let req = [LabelRequest {
            x: 15.0,
            y: 15.0,
            symbol: 4.0,
            w: 60.0,
            h: 14.0,
        }];
        assert_eq!(place(&req, &[], frame, 3.0), vec![None]);
    }

    #[test]
    fn prefix_shared_by_all_names() {
        assert_eq!(common_prefix(&["SKB-P01", "SKB-I10", "SKB-P22"]), "SKB-");
        assert_eq!(common_prefix(&["A-1", "B-2"]), "");
        assert_eq!(common_prefix(&["N 12-A", "N 12-B"]), "N 12-");
        assert_eq!(
            common_prefix(&["SKB-", "SKB-P1"]),
            "",
            "a name would be left empty"
        );
        assert_eq!(common_prefix(&["only"]), "");
    }
}
