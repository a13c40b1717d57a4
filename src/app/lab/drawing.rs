//! The lab's tree picture: the tree in the heat scale, the equivalent cylinder under it, the
//! marks (soma, killed tips, injection site), section names, the colour bar and picking.

use super::{LabColour, LabView};
use crate::lab::{LabResult, LabTree};
use eframe::egui::{self, Color32, Pos2, Sense, Stroke, Vec2};

/// Model x–y (µm) to screen points, fitted to the drawing's rectangle.
struct Frame {
    centre: Pos2,
    k: f64,
    cx: f64,
    cy: f64,
}

impl Frame {
    /// Fits the tree's points, and the equivalent cylinder's under them when there is one;
    /// returns the frame and the y at which the cylinder is drawn.
    fn fit(rect: egui::Rect, tree: &[[f64; 3]], cylinder: Option<&[[f64; 3]]>) -> (Frame, f64) {
        let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
        for p in tree {
            for c in 0..2 {
                lo[c] = lo[c].min(p[c]);
                hi[c] = hi[c].max(p[c]);
            }
        }
        let cyl_y = lo[1] - 0.12 * (hi[0] - lo[0]).max(hi[1] - lo[1]).max(1.0);
        if let Some(c) = cylinder {
            for p in c {
                lo[0] = lo[0].min(p[0]);
                hi[0] = hi[0].max(p[0]);
            }
            lo[1] = cyl_y - 0.02 * (hi[0] - lo[0]);
        }
        let margin = 24.0;
        let w = (hi[0] - lo[0]).max(1.0);
        let h = (hi[1] - lo[1]).max(1.0);
        let k = ((rect.width() as f64 - 2.0 * margin) / w)
            .min((rect.height() as f64 - 2.0 * margin - 20.0) / h);
        let frame = Frame {
            centre: rect.center() - Vec2::new(0.0, 10.0),
            k,
            cx: (lo[0] + hi[0]) / 2.0,
            cy: (lo[1] + hi[1]) / 2.0,
        };
        (frame, cyl_y)
    }

    fn at(&self, p: &[f64; 3]) -> Pos2 {
        Pos2::new(
            self.centre.x + ((p[0] - self.cx) * self.k) as f32,
            self.centre.y - ((p[1] - self.cy) * self.k) as f32,
        )
    }
}

/// Stroke width of a branch of diameter `d` (µm).
fn width(d: f64) -> f32 {
    (d as f32 * 2.5).clamp(1.5, 14.0)
}

/// Start and end node of section `s`.
fn section_ends(t: &LabTree, s: usize) -> (usize, usize) {
    let start = match t.sections[s].parent {
        Some(p) => t.section_end_node[p] as usize,
        None => 0,
    };
    (start, t.section_end_node[s] as usize)
}

impl LabView {
    /// The tree drawing; returns the section clicked, if any, and the middle of every branch
    /// on screen.
    pub(super) fn drawing(
        &self,
        ui: &mut egui::Ui,
        r: &LabResult,
        size: Vec2,
    ) -> (Option<usize>, Vec<Pos2>) {
        let (rect, response) = ui.allocate_exact_size(size, Sense::click());
        let painter = ui.painter_at(rect);
        painter.rect_filled(rect, 4.0, Color32::from_rgb(18, 18, 22));
        let t = &r.tree;
        // the equivalent cylinder, when there is one, goes under the tree at the same scale
        let cyl = r.equivalent.shown_cylinder();
        let (frame, cyl_y) = Frame::fit(rect, &t.flat.pos, cyl.map(|c| &c.tree.flat.pos[..]));
        let (values, range, log) = self.colour_values(r);
        let colour = |v: f64| self.colour(v, range, log);
        // the path first, as a pale halo under the branches
        for &q in r.path.nodes.iter().skip(1) {
            let a = frame.at(&t.flat.pos[t.flat.parent[q] as usize]);
            let b = frame.at(&t.flat.pos[q]);
            let halo = Stroke::new(width(t.node_diam_um(q)) + 5.0, Color32::from_gray(90));
            painter.line_segment([a, b], halo);
        }
        for (q, &v) in values.iter().enumerate().skip(1) {
            let a = frame.at(&t.flat.pos[t.flat.parent[q] as usize]);
            let b = frame.at(&t.flat.pos[q]);
            painter.line_segment([a, b], Stroke::new(width(t.node_diam_um(q)), colour(v)));
        }
        if let Some(c) = cyl {
            self.paint_cylinder(&painter, &frame, c, cyl_y, range, log);
        }
        self.paint_marks(&painter, &frame, r, colour(values[0]));
        self.paint_names(&painter, &frame, t);
        self.colour_bar(&painter, rect, range, log);
        let mids: Vec<Pos2> = (0..t.sections.len())
            .map(|s| {
                let (start, end) = section_ends(t, s);
                let (a, b) = (frame.at(&t.flat.pos[start]), frame.at(&t.flat.pos[end]));
                a + (b - a) * 0.5
            })
            .collect();
        let clicked = response
            .clicked()
            .then(|| response.interact_pointer_pos())
            .flatten()
            .and_then(|pos| pick(t, &frame, pos));
        (clicked, mids)
    }

    /// The heat-scale colour of a value (log scale for input resistance).
    fn colour(&self, v: f64, range: (f64, f64), log: bool) -> Color32 {
        if log {
            self.scale
                .colour(v.max(1e-12).ln(), range.0.ln(), range.1.ln())
        } else {
            self.scale.colour(v, range.0, range.1)
        }
    }

    /// The equivalent cylinder at height `y`, in the same colours as the tree.
    fn paint_cylinder(
        &self,
        painter: &egui::Painter,
        frame: &Frame,
        c: &LabResult,
        y: f64,
        range: (f64, f64),
        log: bool,
    ) {
        let (cv, _, _) = self.colour_values(c);
        let ct = &c.tree;
        let shift = |p: &[f64; 3]| [p[0], p[1] + y, p[2]];
        for (q, &v) in cv.iter().enumerate().skip(1) {
            let a = frame.at(&shift(&ct.flat.pos[ct.flat.parent[q] as usize]));
            let b = frame.at(&shift(&ct.flat.pos[q]));
            let stroke = Stroke::new(width(ct.node_diam_um(q)), self.colour(v, range, log));
            painter.line_segment([a, b], stroke);
        }
        painter.text(
            frame.at(&shift(&ct.flat.pos[0])) + Vec2::new(0.0, 10.0),
            egui::Align2::LEFT_TOP,
            "equivalent cylinder",
            egui::FontId::proportional(11.0),
            Color32::from_gray(170),
        );
    }

    /// The soma, the killed tips (×) and the injection site (ring).
    fn paint_marks(&self, painter: &egui::Painter, frame: &Frame, r: &LabResult, soma: Color32) {
        let t = &r.tree;
        let soma_r = (t.spec.soma_diam_um as f32 * frame.k as f32 / 2.0).max(4.0);
        let s0 = frame.at(&t.flat.pos[0]);
        painter.circle_filled(s0, soma_r, soma);
        painter.circle_stroke(s0, soma_r, Stroke::new(1.0, Color32::from_gray(200)));
        let white = Stroke::new(2.0, Color32::from_rgb(240, 240, 240));
        for q in (0..t.len()).filter(|&q| t.killed[q]) {
            let p = frame.at(&t.flat.pos[q]);
            painter.line_segment([p + Vec2::new(-5.0, -5.0), p + Vec2::new(5.0, 5.0)], white);
            painter.line_segment([p + Vec2::new(-5.0, 5.0), p + Vec2::new(5.0, -5.0)], white);
        }
        let inj = frame.at(&t.flat.pos[r.path.nodes[r.path.inject_at]]);
        painter.circle_stroke(inj, 7.0, Stroke::new(2.0, crate::app::colour::SITE));
    }

    /// Section names at mid-branch (on a big tree only the chosen branch's).
    fn paint_names(&self, painter: &egui::Painter, frame: &Frame, t: &LabTree) {
        let all_names = t.sections.len() <= 15;
        for (s, sec) in t.sections.iter().enumerate() {
            if !all_names && s != self.chosen {
                continue;
            }
            let (start, end) = section_ends(t, s);
            let a = frame.at(&t.flat.pos[start]);
            let b = frame.at(&t.flat.pos[end]);
            // a name needs room: short branches stay unnamed unless chosen
            if s != self.chosen && (b - a).length() < 12.0 * sec.name.len() as f32 {
                continue;
            }
            let col = if s == self.chosen {
                Color32::from_rgb(255, 230, 120)
            } else {
                Color32::from_gray(150)
            };
            painter.text(
                a + (b - a) * 0.5 + Vec2::new(0.0, -10.0),
                egui::Align2::CENTER_BOTTOM,
                &sec.name,
                egui::FontId::proportional(11.0),
                col,
            );
        }
    }

    /// The colour bar and the legend line at the bottom of the drawing.
    fn colour_bar(&self, painter: &egui::Painter, rect: egui::Rect, range: (f64, f64), log: bool) {
        let bar = egui::Rect::from_min_size(
            Pos2::new(rect.left() + 10.0, rect.bottom() - 18.0),
            Vec2::new(160.0, 8.0),
        );
        for i in 0..64 {
            let x0 = bar.left() + bar.width() * i as f32 / 64.0;
            let x1 = bar.left() + bar.width() * (i + 1) as f32 / 64.0;
            painter.rect_filled(
                egui::Rect::from_min_max(Pos2::new(x0, bar.top()), Pos2::new(x1, bar.bottom())),
                0.0,
                self.scale.at(i as f64 / 63.0),
            );
        }
        let fmt = |v: f64| {
            if log {
                format!("{v:.0} MΩ")
            } else {
                format!("{v:.2}")
            }
        };
        painter.text(
            Pos2::new(bar.right() + 6.0, bar.center().y),
            egui::Align2::LEFT_CENTER,
            format!(
                "{} … {}    ring: injection point    ×: killed tip",
                fmt(range.0),
                fmt(range.1)
            ),
            egui::FontId::proportional(11.0),
            Color32::from_gray(200),
        );
    }

    /// Per-node values of the drawing, their range, and whether the scale is logarithmic.
    fn colour_values<'a>(&self, r: &'a LabResult) -> (&'a [f64], (f64, f64), bool) {
        match self.colour_by {
            LabColour::FromSoma => (&r.v_from_soma_all, span(&r.v_from_soma_all), false),
            LabColour::FromTip => (&r.v_from_tip_all, span(&r.v_from_tip_all), false),
            LabColour::InputResistance => {
                let (lo, hi) = r
                    .rin_all_mohm
                    .iter()
                    .filter(|v| **v > 0.0 && v.is_finite())
                    .fold((f64::INFINITY, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
                let lo = if lo.is_finite() { lo } else { 1.0 };
                (&r.rin_all_mohm, (lo, hi.max(lo * 1.001)), true)
            }
        }
    }
}

/// The section of the segment nearest to a click (within 12 points), if any.
fn pick(t: &LabTree, frame: &Frame, pos: Pos2) -> Option<usize> {
    let mut best = (f32::INFINITY, None);
    for q in 1..t.len() {
        let a = frame.at(&t.flat.pos[t.flat.parent[q] as usize]);
        let b = frame.at(&t.flat.pos[q]);
        let d = dist_to_segment(pos, a, b);
        if d < best.0 {
            best = (d, Some(q));
        }
    }
    let q = best.1.filter(|_| best.0 < 12.0)?;
    let s = t.node_section[q];
    (s != crate::morphology::NONE).then_some(s as usize)
}

fn dist_to_segment(p: Pos2, a: Pos2, b: Pos2) -> f32 {
    let ab = b - a;
    let len2 = ab.length_sq();
    let t = if len2 > 0.0 {
        ((p - a).dot(ab) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (a + ab * t - p).length()
}

/// Smallest and largest finite value (a range of at least 0.01 so that the scale is defined).
fn span(v: &[f64]) -> (f64, f64) {
    let (lo, hi) = v
        .iter()
        .filter(|x| x.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        });
    if lo.is_finite() {
        (lo, hi.max(lo + 0.01))
    } else {
        (0.0, 1.0)
    }
}
