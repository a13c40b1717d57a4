//! The two drawings: the original arbor and the reduced tree, in a shared orthographic camera.
//! Geometry is tessellated into one mesh when the cell, the camera or the canvas size changes;
//! a new colouring only rewrites the vertex colours.

use super::colour::{self, Colours, FAINT, SITE};
use super::reduction::tree_disc_radii;
use super::state::{CellState, nice_step};
use crate::morphology::NONE;
use crate::reduce::ReducedTree;
use eframe::egui::{self, Color32, CornerRadius, Mesh, Pos2, Rect, Sense, Shape, Stroke, Vec2};
use std::sync::Arc;

pub use super::mesh::{append_other_trees, recolour, tessellate};

/// Orthographic camera shared by both canvases.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Camera {
    /// Turn about the vertical axis, then tilt about the horizontal axis (radians).
    pub yaw: f32,
    pub pitch: f32,
    /// Magnification relative to "whole cell fits".
    pub zoom: f32,
    /// Shift on screen (points).
    pub pan: Vec2,
}

impl Default for Camera {
    fn default() -> Self {
        Camera {
            yaw: 0.0,
            pitch: 0.0,
            zoom: 1.0,
            pan: Vec2::ZERO,
        }
    }
}

/// The three axis-aligned views.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AxisView {
    /// Looking along z: x to the right, y up.
    Front,
    /// Looking along x: z to the right, y up.
    Side,
    /// Looking along y: x to the right, z up.
    Top,
}

impl Camera {
    pub fn axis(view: AxisView) -> Camera {
        let h = std::f32::consts::FRAC_PI_2;
        let (yaw, pitch) = match view {
            AxisView::Front => (0.0, 0.0),
            AxisView::Side => (h, 0.0),
            AxisView::Top => (0.0, -h),
        };
        Camera {
            yaw,
            pitch,
            ..Camera::default()
        }
    }
}

/// A camera fitted to one canvas: maps µm to screen points.
#[derive(Debug, Clone, Copy)]
pub struct Projector {
    centre: [f64; 3],
    /// Points per µm.
    pub scale: f32,
    origin: Pos2,
    cy: f32,
    sy: f32,
    cp: f32,
    sp: f32,
}

impl Projector {
    pub fn new(cam: &Camera, rect: Rect, centre: [f64; 3], radius_um: f64) -> Projector {
        let fit = 0.46 * rect.width().min(rect.height()) / radius_um.max(1e-6) as f32;
        Projector {
            centre,
            scale: fit * cam.zoom,
            origin: rect.center() + cam.pan,
            cy: cam.yaw.cos(),
            sy: cam.yaw.sin(),
            cp: cam.pitch.cos(),
            sp: cam.pitch.sin(),
        }
    }

    #[inline]
    pub fn project(&self, p: [f64; 3]) -> Pos2 {
        let x = (p[0] - self.centre[0]) as f32;
        let y = (p[1] - self.centre[1]) as f32;
        let z = (p[2] - self.centre[2]) as f32;
        let x1 = self.cy * x + self.sy * z;
        let z1 = -self.sy * x + self.cy * z;
        let y2 = self.cp * y - self.sp * z1;
        Pos2::new(
            self.origin.x + x1 * self.scale,
            self.origin.y - y2 * self.scale,
        )
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
struct GeomKey {
    geometry: u64,
    cam: Camera,
    rect: Rect,
    min_px: f32,
}

/// How the reduced tree is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ReducedLayout {
    /// Compartments at their positions over a faint copy of the original.
    InPlace,
    /// A binary dendrogram: depth downward, edge thickness from axial conductance.
    Dendrogram,
}

/// Which tree a canvas shows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Side {
    Original,
    Reduced,
}

/// What the user did on a canvas this frame.
#[derive(Debug, Default, Clone, Copy)]
pub struct CanvasEvents {
    /// A whole-tree node clicked on the original.
    pub clicked_node: Option<usize>,
    pub camera_changed: bool,
}

/// One drawing: camera handling, the cached mesh, hover and pick.
pub struct ArborCanvas {
    pub side: Side,
    key: Option<GeomKey>,
    colour_version: u64,
    mesh: Arc<Mesh>,
    /// Screen position of every whole-tree node at the cached key.
    screen: Vec<Pos2>,
    /// Screen position of every compartment (in the current layout) and its drawn radius.
    comp_screen: Vec<(Pos2, f32)>,
    pub last_rect: Rect,
    /// Number of times the mesh was tessellated (for tests and the status line).
    pub tessellations: u64,
    pub hovered: Option<usize>,
}

impl ArborCanvas {
    pub fn new(side: Side) -> ArborCanvas {
        ArborCanvas {
            side,
            key: None,
            colour_version: 0,
            mesh: Arc::new(Mesh::default()),
            screen: Vec::new(),
            comp_screen: Vec::new(),
            last_rect: Rect::NOTHING,
            tessellations: 0,
            hovered: None,
        }
    }

    /// Screen position of a whole-tree node as last drawn.
    pub fn screen_of(&self, node: usize) -> Option<Pos2> {
        self.screen.get(node).copied()
    }

    /// Screen position of a compartment as last drawn.
    pub fn screen_of_comp(&self, c: usize) -> Option<Pos2> {
        self.comp_screen.get(c).map(|p| p.0)
    }

    /// Makes sure the cached mesh fits the state, camera and rect; recolours if only the
    /// colours changed. Public so that benchmarks can time it.
    pub fn prepare(
        &mut self,
        state: &CellState,
        colours: &Colours,
        cam: &Camera,
        rect: Rect,
        min_px: f32,
    ) {
        let key = GeomKey {
            geometry: state.geometry_version,
            cam: *cam,
            rect,
            min_px,
        };
        let cell = &state.cell;
        let flat = &cell.flat;
        let faint = self.side == Side::Reduced;
        if self.key != Some(key) {
            let proj = Projector::new(cam, rect, cell.centre, cell.extent_radius_um);
            self.screen = flat.pos.iter().map(|&p| proj.project(p)).collect();
            let mesh = if faint {
                tessellate(
                    &flat.parent,
                    &flat.r_dist_um,
                    &self.screen,
                    cell.soma_radius_um,
                    proj.scale,
                    min_px,
                    &|_| FAINT,
                )
            } else {
                tessellate(
                    &flat.parent,
                    &flat.r_dist_um,
                    &self.screen,
                    cell.soma_radius_um,
                    proj.scale,
                    min_px,
                    &|k| colours.nodes[k],
                )
            };
            let mut mesh = mesh;
            append_other_trees(
                &mut mesh,
                &cell.morph,
                &proj,
                min_px,
                if faint { FAINT } else { colour::OFF },
            );
            self.mesh = Arc::new(mesh);
            self.key = Some(key);
            self.colour_version = state.colour_version;
            self.tessellations += 1;
        } else if !faint && self.colour_version != state.colour_version {
            recolour(Arc::make_mut(&mut self.mesh), flat.len(), &colours.nodes);
            self.colour_version = state.colour_version;
        }
    }

    /// Draws the canvas and handles the camera, hover and clicks.
    pub fn ui(
        &mut self,
        ui: &mut egui::Ui,
        state: &CellState,
        colours: &Colours,
        cam: &mut Camera,
        layout: ReducedLayout,
        size: Vec2,
    ) -> CanvasEvents {
        let mut ev = CanvasEvents::default();
        let (rect, response) = ui.allocate_exact_size(size, Sense::click_and_drag());
        let label = match self.side {
            Side::Original => "Original arbor",
            Side::Reduced => "Reduced tree",
        };
        response.widget_info(|| egui::WidgetInfo::labeled(egui::Role::Canvas, true, label));
        self.last_rect = rect;
        let painter = ui.painter_at(rect);
        painter.rect_filled(rect, CornerRadius::same(4), Color32::from_rgb(18, 18, 24));

        let dendro = self.side == Side::Reduced && layout == ReducedLayout::Dendrogram;
        if !dendro {
            ev.camera_changed = steer(ui, &response, rect, cam);
        }

        if state.cell.is_empty() {
            return ev;
        }
        let min_px = 1.2;
        self.prepare(state, colours, cam, rect, min_px);
        match (self.side, layout) {
            (Side::Original, _) => {
                painter.add(Shape::Mesh(self.mesh.clone()));
                super::synapses::mark_original(&painter, state, &self.screen);
                if let Some(site) = state.site
                    && let Some(&p) = self.screen.get(site)
                {
                    painter.circle_stroke(p, 7.0, Stroke::new(2.5, SITE));
                    painter.circle_filled(p, 2.5, SITE);
                }
                self.scale_bar(&painter, state, cam, rect);
            }
            (Side::Reduced, ReducedLayout::InPlace) => {
                painter.add(Shape::Mesh(self.mesh.clone()));
                self.draw_comps_in_place(&painter, state, colours, cam, rect);
                self.scale_bar(&painter, state, cam, rect);
            }
            (Side::Reduced, ReducedLayout::Dendrogram) => {
                self.draw_dendrogram(&painter, state, colours, rect);
            }
        }
        if self.side == Side::Reduced {
            super::synapses::mark_reduced(&painter, state, &self.comp_screen);
        }
        self.titles(&painter, state, rect);
        self.hover(&painter, state, &response, rect);
        if self.side == Side::Original
            && response.clicked()
            && let Some(p) = response.interact_pointer_pos()
        {
            ev.clicked_node = nearest(&self.screen, p, 12.0);
        }
        ev
    }

    /// The title, and the reason when there is no reduced tree.
    fn titles(&self, painter: &egui::Painter, state: &CellState, rect: Rect) {
        if self.side == Side::Reduced && state.reduced.is_none() {
            let msg = if state.reduction_note.is_empty() {
                "no reduced tree"
            } else {
                &state.reduction_note
            };
            painter.text(
                rect.center_top() + Vec2::new(0.0, 24.0),
                egui::Align2::CENTER_CENTER,
                msg,
                egui::FontId::proportional(15.0),
                Color32::from_gray(200),
            );
        }
        painter.text(
            rect.left_top() + Vec2::new(8.0, 6.0),
            egui::Align2::LEFT_TOP,
            match self.side {
                Side::Original => "Original".to_string(),
                Side::Reduced => match &state.reduced {
                    Some(r) => format!("Reduced: {} compartments", r.tree.len()),
                    None => "Reduced".to_string(),
                },
            },
            egui::FontId::proportional(14.0),
            Color32::from_gray(220),
        );
    }

    /// The hover box over the nearest node or compartment.
    fn hover(
        &mut self,
        painter: &egui::Painter,
        state: &CellState,
        response: &egui::Response,
        rect: Rect,
    ) {
        self.hovered = None;
        if let Some(p) = response.hover_pos() {
            let hit = if self.side == Side::Original {
                nearest(&self.screen, p, 10.0)
            } else {
                self.comp_screen
                    .iter()
                    .enumerate()
                    .filter(|(_, (q, r))| q.distance(p) <= r.max(6.0) + 4.0)
                    .min_by(|a, b| a.1.0.distance(p).total_cmp(&b.1.0.distance(p)))
                    .map(|(i, _)| i)
            };
            self.hovered = hit;
            if let Some(h) = hit {
                let text = if self.side == Side::Original {
                    state.describe_node(h)
                } else {
                    state.describe_comp(h)
                };
                hover_box(painter, p, rect, &text);
            }
        }
    }

    fn scale_bar(&self, painter: &egui::Painter, state: &CellState, cam: &Camera, rect: Rect) {
        let proj = Projector::new(cam, rect, state.cell.centre, state.cell.extent_radius_um);
        if proj.scale.is_nan() || proj.scale <= 0.0 {
            return;
        }
        let um = nice_step(0.18 * rect.width() as f64 / proj.scale as f64);
        let len = um as f32 * proj.scale;
        let y = rect.bottom() - 14.0;
        let x0 = rect.left() + 14.0;
        let c = Color32::from_gray(230);
        painter.line_segment(
            [Pos2::new(x0, y), Pos2::new(x0 + len, y)],
            Stroke::new(2.0, c),
        );
        for x in [x0, x0 + len] {
            painter.line_segment(
                [Pos2::new(x, y - 4.0), Pos2::new(x, y + 4.0)],
                Stroke::new(1.5, c),
            );
        }
        painter.text(
            Pos2::new(x0 + len * 0.5, y - 6.0),
            egui::Align2::CENTER_BOTTOM,
            format!("{} µm", fmt_um(um)),
            egui::FontId::proportional(12.0),
            c,
        );
    }

    fn draw_comps_in_place(
        &mut self,
        painter: &egui::Painter,
        state: &CellState,
        colours: &Colours,
        cam: &Camera,
        rect: Rect,
    ) {
        self.comp_screen.clear();
        let Some(r) = &state.reduced else {
            return;
        };
        let cell = &state.cell;
        let proj = Projector::new(cam, rect, cell.centre, cell.extent_radius_um);
        let t = &r.tree;
        let widths = edge_widths(t);
        let radii = tree_disc_radii(t, rect.width().min(rect.height()));
        for (x, &rad) in t.compartments.iter().zip(&radii) {
            self.comp_screen.push((proj.project(x.position_um), rad));
        }
        for (c, &w) in widths.iter().enumerate().skip(1) {
            let Some(p) = t.compartments[c].parent else {
                continue;
            };
            painter.line_segment(
                [self.comp_screen[p as usize].0, self.comp_screen[c].0],
                Stroke::new(w, colours.comps[c]),
            );
        }
        for c in 0..t.len() {
            let (p, rad) = self.comp_screen[c];
            painter.circle(
                p,
                rad,
                colours.comps[c],
                Stroke::new(1.0, Color32::from_gray(20)),
            );
        }
        if let Some(sc) = r.site_comp {
            let (p, rad) = self.comp_screen[sc];
            painter.circle_stroke(p, rad + 4.0, Stroke::new(2.5, SITE));
        }
    }

    fn draw_dendrogram(
        &mut self,
        painter: &egui::Painter,
        state: &CellState,
        colours: &Colours,
        rect: Rect,
    ) {
        self.comp_screen.clear();
        let Some(r) = &state.reduced else {
            return;
        };
        let t = &r.tree;
        let widths = edge_widths(t);
        let xy = dendrogram_layout(&t.parents());
        let inner = rect.shrink2(Vec2::new(24.0, 34.0));
        for &(x, y) in &xy {
            let p = Pos2::new(
                inner.left() + x as f32 * inner.width(),
                inner.top() + y as f32 * inner.height(),
            );
            self.comp_screen.push((p, 4.0));
        }
        for (c, &w) in widths.iter().enumerate() {
            let Some(p) = t.compartments[c].parent else {
                continue;
            };
            let a = self.comp_screen[p as usize].0;
            let b = self.comp_screen[c].0;
            let col = colours.comps[c];
            painter.line_segment(
                [Pos2::new(a.x, a.y), Pos2::new(b.x, a.y)],
                Stroke::new(w, col),
            );
            painter.line_segment([Pos2::new(b.x, a.y), b], Stroke::new(w, col));
        }
        for c in 0..t.len() {
            let (p, _) = self.comp_screen[c];
            painter.circle_filled(p, 3.5, colours.comps[c]);
        }
        if let Some(sc) = r.site_comp {
            painter.circle_stroke(self.comp_screen[sc].0, 8.0, Stroke::new(2.5, SITE));
        }
        painter.text(
            rect.right_bottom() - Vec2::new(8.0, 6.0),
            egui::Align2::RIGHT_BOTTOM,
            "depth grows downward; line width shows axial conductance",
            egui::FontId::proportional(12.0),
            Color32::from_gray(170),
        );
    }
}

/// Line width of the edge to each compartment: 1–7 points on the log of its axial conductance
/// relative to the tree's range (3 where there is no range).
pub fn edge_widths(t: &ReducedTree) -> Vec<f32> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for x in t.compartments.iter().skip(1) {
        let g = x.g_axial_ns;
        if g > 0.0 {
            lo = lo.min(g.ln());
            hi = hi.max(g.ln());
        }
    }
    t.compartments
        .iter()
        .map(|x| {
            let g = x.g_axial_ns;
            if g.is_nan() || g <= 0.0 || !lo.is_finite() || hi - lo < 1e-9 {
                3.0
            } else {
                1.0 + 6.0 * ((g.ln() - lo) / (hi - lo)) as f32
            }
        })
        .collect()
}

/// Dendrogram positions in [0, 1]²: leaves spread evenly left to right in depth-first order,
/// each parent centred over its children, depth downward. Loops only (no recursion).
pub fn dendrogram_layout(parent: &[u32]) -> Vec<(f64, f64)> {
    let n = parent.len();
    if n == 0 {
        return Vec::new();
    }
    let (start, kids) = crate::cable::children_csr(parent);
    let mut depth = vec![0u32; n];
    for k in 1..n {
        if parent[k] != NONE {
            depth[k] = depth[parent[k] as usize] + 1;
        }
    }
    let max_depth = depth.iter().copied().max().unwrap_or(0).max(1);
    // depth-first order of leaves with an explicit stack
    let mut x = vec![0.0; n];
    let mut leaves = 0usize;
    let mut stack = vec![0u32];
    let mut leaf_order = Vec::new();
    while let Some(k) = stack.pop() {
        let ks = &kids[start[k as usize] as usize..start[k as usize + 1] as usize];
        if ks.is_empty() {
            leaf_order.push(k);
            leaves += 1;
        }
        for &c in ks.iter().rev() {
            stack.push(c);
        }
    }
    for (i, &l) in leaf_order.iter().enumerate() {
        x[l as usize] = if leaves > 1 {
            i as f64 / (leaves - 1) as f64
        } else {
            0.5
        };
    }
    // parents centred over children: children before parents
    for k in (0..n).rev() {
        let ks = &kids[start[k] as usize..start[k + 1] as usize];
        if !ks.is_empty() {
            x[k] = ks.iter().map(|&c| x[c as usize]).sum::<f64>() / ks.len() as f64;
        }
    }
    (0..n)
        .map(|k| (x[k], depth[k] as f64 / max_depth as f64))
        .collect()
}

/// Camera input: drag turns, right-drag or shift-drag shifts, wheel zooms about the pointer,
/// double-click resets. True if the camera changed.
fn steer(ui: &egui::Ui, response: &egui::Response, rect: Rect, cam: &mut Camera) -> bool {
    let mut changed = false;
    if response.dragged() {
        let d = response.drag_delta();
        let shift = ui.input(|i| i.modifiers.shift);
        if response.dragged_by(egui::PointerButton::Secondary)
            || response.dragged_by(egui::PointerButton::Middle)
            || shift
        {
            cam.pan += d;
        } else {
            cam.yaw += d.x * 0.01;
            cam.pitch = (cam.pitch + d.y * 0.01).clamp(-3.1, 3.1);
        }
        changed = true;
    }
    if response.hovered() {
        let scroll = ui.input(|i| i.smooth_scroll_delta.y);
        if scroll != 0.0 {
            let f = (scroll * 0.002).exp();
            // zoom about the pointer
            if let Some(p) = response.hover_pos() {
                let c = rect.center() + cam.pan;
                cam.pan += (p - c) * (1.0 - f);
            }
            cam.zoom = (cam.zoom * f).clamp(0.05, 200.0);
            changed = true;
        }
    }
    if response.double_clicked() {
        *cam = Camera::default();
        changed = true;
    }
    changed
}

fn nearest(pts: &[Pos2], p: Pos2, within: f32) -> Option<usize> {
    let mut best = None;
    let mut bd = within * within;
    for (i, q) in pts.iter().enumerate() {
        let d = (q.x - p.x).powi(2) + (q.y - p.y).powi(2);
        if d <= bd {
            bd = d;
            best = Some(i);
        }
    }
    best
}

fn fmt_um(v: f64) -> String {
    if v >= 1.0 {
        format!("{v:.0}")
    } else {
        format!("{v}")
    }
}

fn hover_box(painter: &egui::Painter, p: Pos2, rect: Rect, text: &str) {
    let font = egui::FontId::proportional(13.0);
    let galley = painter.layout_no_wrap(text.to_string(), font, Color32::from_gray(235));
    let size = galley.size() + Vec2::splat(12.0);
    let mut at = p + Vec2::new(16.0, 16.0);
    if at.x + size.x > rect.right() {
        at.x = p.x - 16.0 - size.x;
    }
    if at.y + size.y > rect.bottom() {
        at.y = p.y - 16.0 - size.y;
    }
    let r = Rect::from_min_size(at, size);
    painter.rect_filled(
        r,
        CornerRadius::same(4),
        Color32::from_rgba_unmultiplied(30, 32, 40, 235),
    );
    painter.galley(at + Vec2::splat(6.0), galley, Color32::WHITE);
}

/// Colour bar: the heat scale with its range and unit, or a key of categories.
pub fn colour_bar(ui: &mut egui::Ui, state: &CellState, colours: &Colours, scale: &colour::Scale) {
    use super::state::ColourBy;
    let by = state.colour_by;
    ui.horizontal(|ui| {
        if by.is_continuous() {
            let (lo, hi) = colours.range;
            ui.label(fmt_value(by, lo));
            let (rect, _) = ui.allocate_exact_size(Vec2::new(320.0, 16.0), Sense::hover());
            let painter = ui.painter_at(rect);
            let mut mesh = Mesh::default();
            let steps = 64;
            for i in 0..steps {
                let t0 = i as f32 / steps as f32;
                let t1 = (i + 1) as f32 / steps as f32;
                let r = Rect::from_min_max(
                    Pos2::new(rect.left() + t0 * rect.width(), rect.top()),
                    Pos2::new(rect.left() + t1 * rect.width(), rect.bottom()),
                );
                mesh.add_colored_rect(r, scale.at(((t0 + t1) * 0.5) as f64));
            }
            painter.add(Shape::mesh(mesh));
            ui.label(fmt_value(by, hi));
            ui.label(state.value_label());
            if by == ColourBy::InputResistance {
                ui.label("(log scale)");
            }
        } else if by == ColourBy::NeuriteType {
            for &k in std::iter::once(&1).chain(state.cell.kinds.iter()) {
                swatch(ui, colour::type_colour(k));
                ui.label(crate::morphology::kind_name(k));
            }
        } else {
            let max = state
                .cell
                .morph
                .strahler
                .first()
                .copied()
                .unwrap_or(1)
                .max(1);
            ui.label("Strahler order");
            for o in 1..=max.min(12) {
                swatch(ui, colour::order_colour(o));
                ui.label(o.to_string());
            }
        }
        swatch(ui, colour::OFF);
        ui.label("not in the model");
    });
}

fn fmt_value(by: super::state::ColourBy, v: f64) -> String {
    match by {
        super::state::ColourBy::InputResistance => format!("{v:.0}"),
        _ => format!("{v:.1}"),
    }
}

fn swatch(ui: &mut egui::Ui, c: Color32) {
    let (rect, _) = ui.allocate_exact_size(Vec2::new(14.0, 14.0), Sense::hover());
    ui.painter().rect_filled(rect, CornerRadius::same(2), c);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dendrogram_centres_parents_over_children() {
        // root with two children, the second has two children
        let parent = [NONE, 0, 0, 2, 2];
        let xy = dendrogram_layout(&parent);
        // leaves in order 1, 3, 4 at x = 0, 0.5, 1; node 2 at 0.75; root at 0.375
        assert!((xy[1].0 - 0.0).abs() < 1e-12);
        assert!((xy[3].0 - 0.5).abs() < 1e-12);
        assert!((xy[4].0 - 1.0).abs() < 1e-12);
        assert!((xy[2].0 - 0.75).abs() < 1e-12);
        assert!((xy[0].0 - 0.375).abs() < 1e-12);
        assert_eq!(xy[4].1, 1.0);
    }

    #[test]
    fn front_view_maps_x_right_and_y_up() {
        let rect = Rect::from_min_size(Pos2::ZERO, Vec2::new(100.0, 100.0));
        let p = Projector::new(&Camera::default(), rect, [0.0; 3], 10.0);
        let a = p.project([1.0, 0.0, 0.0]);
        let b = p.project([0.0, 1.0, 0.0]);
        assert!(a.x > 50.0 && (a.y - 50.0).abs() < 1e-4);
        assert!(b.y < 50.0 && (b.x - 50.0).abs() < 1e-4);
        // top view: z shows up the screen
        let t = Projector::new(&Camera::axis(AxisView::Top), rect, [0.0; 3], 10.0);
        let c = t.project([0.0, 0.0, 1.0]);
        assert!(c.y < 50.0 && (c.x - 50.0).abs() < 1e-4);
    }
}
