//! Names beside markers, placed so that no two overlap: each label tries
//! the side of its marker with room, then steps up or down a line at a
//! time until it finds a free spot. The page has no script, so this is
//! done once, here, from estimated text widths.

/// Pixels per character of the charts' 11 px text, a little generous.
pub(super) const CHAR_W: f64 = 6.4;
const LINE_H: f64 = 13.0;

/// A marker to name: its centre, its radius, and the name.
pub(super) struct Label<'a> {
    pub x: f64,
    pub y: f64,
    pub r: f64,
    pub text: &'a str,
}

/// Where a label went: the text's anchor point and alignment, and whether
/// it moved off its marker's line (then a leader joins them).
pub(super) struct Placed {
    pub x: f64,
    pub y: f64,
    pub anchor: &'static str,
    pub moved: bool,
}

#[derive(Clone, Copy)]
struct Box_ {
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
}

impl Box_ {
    fn overlaps(&self, o: &Box_) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }
}

/// The plot area labels must stay inside.
#[derive(Clone, Copy)]
pub(super) struct Area {
    pub x0: f64,
    pub x1: f64,
    pub y0: f64,
    pub y1: f64,
}

/// Places every label; the result is in the order given.
pub(super) fn place(labels: &[Label<'_>], area: Area) -> Vec<Placed> {
    let markers: Vec<Box_> = labels
        .iter()
        .map(|l| Box_ {
            x0: l.x - l.r,
            x1: l.x + l.r,
            y0: l.y - l.r,
            y1: l.y + l.r,
        })
        .collect();
    let mut order: Vec<usize> = (0..labels.len()).collect();
    order.sort_by(|a, b| labels[*a].y.total_cmp(&labels[*b].y));
    let mut taken: Vec<Box_> = Vec::new();
    let mut out: Vec<Option<Placed>> = (0..labels.len()).map(|_| None).collect();
    for i in order {
        let l = &labels[i];
        let w = CHAR_W * l.text.chars().count() as f64;
        let room_right = l.x + l.r + 3.0 + w <= area.x1;
        let sides = if room_right {
            [true, false]
        } else {
            [false, true]
        };
        let spot = |right: bool, dy: f64| {
            let x = if right {
                l.x + l.r + 3.0
            } else {
                l.x - l.r - 3.0
            };
            let y = l.y + 4.0 + dy;
            let (x0, x1) = if right { (x, x + w) } else { (x - w, x) };
            (
                Placed {
                    x,
                    y,
                    anchor: if right { "start" } else { "end" },
                    moved: dy != 0.0,
                },
                Box_ {
                    x0,
                    x1,
                    y0: y - 10.0,
                    y1: y + 2.0,
                },
            )
        };
        let inside =
            |b: &Box_| b.x0 >= area.x0 && b.x1 <= area.x1 && b.y0 >= area.y0 && b.y1 <= area.y1;
        let free = |b: &Box_, own_marker: usize, with_markers: bool| {
            !taken.iter().any(|t| t.overlaps(b))
                && (!with_markers
                    || markers
                        .iter()
                        .enumerate()
                        .all(|(j, m)| j == own_marker || !m.overlaps(b)))
        };
        let offsets = [0.0, 1.0, -1.0, 2.0, -2.0, 3.0, -3.0, 4.0, -4.0];
        let mut chosen = None;
        'search: for with_markers in [true, false] {
            for k in offsets {
                for right in sides {
                    let (p, b) = spot(right, k * LINE_H);
                    if inside(&b) && free(&b, i, with_markers) {
                        chosen = Some((p, b));
                        break 'search;
                    }
                }
            }
        }
        let (p, b) = chosen.unwrap_or_else(|| spot(sides[0], 0.0));
        taken.push(b);
        out[i] = Some(p);
    }
    out.into_iter()
        .map(|p| p.expect("every label placed"))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_of_markers_on_one_spot_do_not_overlap() {
        let labels: Vec<Label<'_>> = ["candidate_wide", "candidate_lean", "twin"]
            .iter()
            .map(|t| Label {
                x: 200.0,
                y: 100.0,
                r: 6.0,
                text: t,
            })
            .collect();
        let area = Area {
            x0: 0.0,
            x1: 500.0,
            y0: 0.0,
            y1: 300.0,
        };
        let placed = place(&labels, area);
        for (i, a) in placed.iter().enumerate() {
            for b in &placed[i + 1..] {
                assert!(
                    (a.y - b.y).abs() >= LINE_H - 1e-9 || a.anchor != b.anchor,
                    "labels at {} and {} collide",
                    a.y,
                    b.y
                );
            }
        }
    }
}
