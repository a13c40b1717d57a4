//! The arbor as one egui mesh: a quad per segment and a disc for the soma, built once per
//! geometry; a new colouring only rewrites vertex colours. Projection is the canvas's
//! `Projector`; no widgets here.

use super::canvas::Projector;
use crate::morphology::NONE;
use eframe::egui::{self, Color32, Mesh, Pos2, Vec2, epaint::Vertex};

/// Vertices of the soma disc.
const SOMA_RIM: usize = 24;

/// Tessellates the arbor: one quad per segment (width from the diameter, at least `min_px`),
/// a disc for the soma. Vertex 4(k−1)… belong to node k; the soma disc is last.
pub fn tessellate(
    parent: &[u32],
    radius_um: &[f64],
    screen: &[Pos2],
    soma_radius_um: f64,
    scale: f32,
    min_px: f32,
    colours: &dyn Fn(usize) -> Color32,
) -> Mesh {
    let n = parent.len();
    let mut mesh = Mesh::default();
    if n == 0 {
        return mesh;
    }
    mesh.vertices.reserve(4 * n + SOMA_RIM + 1);
    mesh.indices.reserve(6 * n + 3 * SOMA_RIM);
    let uv = egui::epaint::WHITE_UV;
    for k in 1..n {
        let a = screen[parent[k] as usize];
        let b = screen[k];
        let r = radius_um[k];
        let w = if r.is_finite() {
            (2.0 * r as f32 * scale).max(min_px)
        } else {
            min_px
        };
        let d = b - a;
        let len = d.length();
        let (dir, nrm) = if len > 1e-6 {
            let u = d / len;
            (u, Vec2::new(-u.y, u.x) * (0.5 * w))
        } else {
            (Vec2::ZERO, Vec2::ZERO)
        };
        // extend the start by half a width so bends do not show gaps
        let a = a - dir * (0.5 * w);
        let c = colours(k);
        let i0 = mesh.vertices.len() as u32;
        for pos in [a + nrm, a - nrm, b + nrm, b - nrm] {
            mesh.vertices.push(Vertex { pos, uv, color: c });
        }
        mesh.indices
            .extend_from_slice(&[i0, i0 + 1, i0 + 2, i0 + 1, i0 + 3, i0 + 2]);
    }
    let c = colours(0);
    let centre = screen[0];
    let r = (soma_radius_um as f32 * scale).max(2.0 * min_px).max(3.0);
    let i0 = mesh.vertices.len() as u32;
    mesh.vertices.push(Vertex {
        pos: centre,
        uv,
        color: c,
    });
    for i in 0..SOMA_RIM {
        let t = i as f32 / SOMA_RIM as f32 * std::f32::consts::TAU;
        mesh.vertices.push(Vertex {
            pos: centre + Vec2::new(t.cos(), t.sin()) * r,
            uv,
            color: c,
        });
    }
    for i in 0..SOMA_RIM as u32 {
        mesh.indices
            .extend_from_slice(&[i0, i0 + 1 + i, i0 + 1 + (i + 1) % SOMA_RIM as u32]);
    }
    mesh
}

/// Rewrites the colours of a mesh made by [`tessellate`].
pub fn recolour(mesh: &mut Mesh, n_nodes: usize, colours: &[Color32]) {
    if n_nodes == 0 {
        return;
    }
    for (quad, &c) in mesh.vertices.chunks_exact_mut(4).zip(&colours[1..n_nodes]) {
        for v in quad {
            v.color = c;
        }
    }
    let c = colours[0];
    let soma = 4 * (n_nodes - 1);
    let end = (soma + SOMA_RIM + 1).min(mesh.vertices.len());
    for v in &mut mesh.vertices[soma..end] {
        v.color = c;
    }
}

/// Appends the trees of the file other than the main one (not part of the cell's model), in
/// one colour, after the main tree's vertices (so [`recolour`] leaves them alone).
pub fn append_other_trees(
    mesh: &mut Mesh,
    morph: &crate::Morphology,
    proj: &Projector,
    min_px: f32,
    colour: Color32,
) {
    let uv = egui::epaint::WHITE_UV;
    for i in morph.main_len..morph.len() {
        let p = morph.parent[i];
        if p == NONE {
            continue;
        }
        let a = proj.project(morph.points[p as usize].pos);
        let b = proj.project(morph.points[i].pos);
        let r = morph.points[i].radius.unwrap_or(0.0);
        let w = if r.is_finite() && r > 0.0 {
            (2.0 * r as f32 * proj.scale).max(min_px)
        } else {
            min_px
        };
        let d = b - a;
        let len = d.length();
        if len <= 1e-6 {
            continue;
        }
        let u = d / len;
        let nrm = Vec2::new(-u.y, u.x) * (0.5 * w);
        let a = a - u * (0.5 * w);
        let i0 = mesh.vertices.len() as u32;
        for pos in [a + nrm, a - nrm, b + nrm, b - nrm] {
            mesh.vertices.push(Vertex {
                pos,
                uv,
                color: colour,
            });
        }
        mesh.indices
            .extend_from_slice(&[i0, i0 + 1, i0 + 2, i0 + 1, i0 + 3, i0 + 2]);
    }
}
