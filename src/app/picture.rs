//! Pictures for figures: an SVG of both drawings with the colour bar (drawn from the data, so it
//! scales cleanly), and a PNG cut from a screenshot of the window.

use super::canvas::{Camera, Projector, ReducedLayout, dendrogram_layout, edge_widths};
use super::colour::{self, Colours, FAINT, Scale, hex};
use super::state::{CellState, nice_step};
use eframe::egui::{self, Color32, Pos2, Rect, Vec2};
use std::fmt::Write;

const PANEL_W: f32 = 640.0;
const PANEL_H: f32 = 560.0;
const BAR_H: f32 = 60.0;

fn opacity(c: Color32) -> f32 {
    c.a() as f32 / 255.0
}

/// Unmultiplies a premultiplied colour for SVG.
fn plain(c: Color32) -> Color32 {
    let a = c.a();
    if a == 0 || a == 255 {
        return c;
    }
    let f = 255.0 / a as f32;
    Color32::from_rgb(
        (c.r() as f32 * f).min(255.0) as u8,
        (c.g() as f32 * f).min(255.0) as u8,
        (c.b() as f32 * f).min(255.0) as u8,
    )
}

fn arbor(out: &mut String, s: &CellState, proj: &Projector, colour_of: &dyn Fn(usize) -> Color32) {
    let f = &s.cell.flat;
    let pts: Vec<Pos2> = f.pos.iter().map(|&p| proj.project(p)).collect();
    for k in 1..f.len() {
        let a = pts[f.parent[k] as usize];
        let b = pts[k];
        let r = f.r_dist_um[k];
        let w = if r.is_finite() {
            (2.0 * r as f32 * proj.scale).max(0.8)
        } else {
            0.8
        };
        let c = colour_of(k);
        let _ = writeln!(
            out,
            r#"<line x1="{:.2}" y1="{:.2}" x2="{:.2}" y2="{:.2}" stroke="{}" stroke-opacity="{:.2}" stroke-width="{:.2}" stroke-linecap="round"/>"#,
            a.x,
            a.y,
            b.x,
            b.y,
            hex(plain(c)),
            opacity(c),
            w
        );
    }
    if !pts.is_empty() {
        let c = colour_of(0);
        let r = (s.cell.soma_radius_um as f32 * proj.scale).max(3.0);
        let _ = writeln!(
            out,
            r#"<circle cx="{:.2}" cy="{:.2}" r="{:.2}" fill="{}" fill-opacity="{:.2}"/>"#,
            pts[0].x,
            pts[0].y,
            r,
            hex(plain(c)),
            opacity(c)
        );
    }
}

fn text(out: &mut String, x: f32, y: f32, size: f32, anchor: &str, t: &str) {
    let t = t
        .replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;");
    let _ = writeln!(
        out,
        r##"<text x="{x:.1}" y="{y:.1}" font-family="sans-serif" font-size="{size}" fill="#e6e6e6" text-anchor="{anchor}">{t}</text>"##
    );
}

fn scale_bar(out: &mut String, proj: &Projector, rect: Rect) {
    let um = nice_step(0.18 * rect.width() as f64 / proj.scale as f64);
    let len = um as f32 * proj.scale;
    let y = rect.bottom() - 16.0;
    let x0 = rect.left() + 16.0;
    let _ = writeln!(
        out,
        r##"<line x1="{x0:.1}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#e6e6e6" stroke-width="2"/>"##,
        x0 + len
    );
    text(
        out,
        x0 + len / 2.0,
        y - 6.0,
        12.0,
        "middle",
        &format!("{um} µm"),
    );
}

/// Both drawings side by side with the shared colour bar, as SVG text.
pub fn svg_figure(
    s: &CellState,
    cam: &Camera,
    layout: ReducedLayout,
    colours: &Colours,
    scale: &Scale,
) -> String {
    let w = 2.0 * PANEL_W;
    let h = PANEL_H + BAR_H;
    let mut out = String::new();
    let _ = writeln!(
        out,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}">"#
    );
    let _ = writeln!(out, r##"<rect width="{w}" height="{h}" fill="#121218"/>"##);
    let left = Rect::from_min_size(Pos2::new(0.0, BAR_H), Vec2::new(PANEL_W, PANEL_H));
    let right = Rect::from_min_size(Pos2::new(PANEL_W, BAR_H), Vec2::new(PANEL_W, PANEL_H));
    let cell = &s.cell;

    // left: the original
    out.push_str("<g id=\"original\">\n");
    svg_original(&mut out, s, cam, left, colours);
    out.push_str("</g>\n");
    // right: the reduced tree
    out.push_str("<g id=\"reduced\">\n");
    let rproj = Projector::new(cam, right, cell.centre, cell.extent_radius_um);
    match &s.reduced {
        Some(r) => svg_reduced(&mut out, s, r, &rproj, right, layout, colours),
        None => text(
            &mut out,
            right.center().x,
            right.center().y,
            15.0,
            "middle",
            &s.reduction_note,
        ),
    }
    out.push_str("</g>\n");
    // the colour bar
    out.push_str("<g id=\"colour-bar\">\n");
    svg_colour_bar(&mut out, s, colours, scale);
    out.push_str("</g>\n</svg>\n");
    out
}

/// The original arbor, the synapse site, a scale bar and the title.
fn svg_original(out: &mut String, s: &CellState, cam: &Camera, left: Rect, colours: &Colours) {
    let cell = &s.cell;
    let proj = Projector::new(cam, left, cell.centre, cell.extent_radius_um);
    arbor(out, s, &proj, &|k| colours.nodes[k]);
    if let Some(site) = s.site {
        let p = proj.project(cell.flat.pos[site]);
        let _ = writeln!(
            out,
            r#"<circle cx="{:.2}" cy="{:.2}" r="7" fill="none" stroke="{}" stroke-width="2.5"/>"#,
            p.x,
            p.y,
            hex(colour::SITE)
        );
    }
    scale_bar(out, &proj, left);
    text(
        out,
        left.left() + 10.0,
        left.top() + 20.0,
        15.0,
        "start",
        "Original",
    );
}

/// The reduced tree in place or as a dendrogram, its site, a scale bar and the title.
fn svg_reduced(
    out: &mut String,
    s: &CellState,
    r: &super::state::Reduced,
    rproj: &Projector,
    right: Rect,
    layout: ReducedLayout,
    colours: &Colours,
) {
    let t = &r.tree;
    let widths = edge_widths(t);
    let pts: Vec<Pos2> = match layout {
        ReducedLayout::InPlace => {
            arbor(out, s, rproj, &|_| FAINT);
            t.compartments
                .iter()
                .map(|x| rproj.project(x.position_um))
                .collect()
        }
        ReducedLayout::Dendrogram => {
            let inner = right.shrink2(Vec2::new(24.0, 34.0));
            dendrogram_layout(&t.parents())
                .into_iter()
                .map(|(x, y)| {
                    Pos2::new(
                        inner.left() + x as f32 * inner.width(),
                        inner.top() + y as f32 * inner.height(),
                    )
                })
                .collect()
        }
    };
    for c in 0..t.len() {
        let Some(p) = t.compartments[c].parent else {
            continue;
        };
        let a = pts[p as usize];
        let b = pts[c];
        let col = hex(colours.comps[c]);
        let w = widths[c];
        if layout == ReducedLayout::Dendrogram {
            let _ = writeln!(
                out,
                r#"<polyline points="{:.2},{:.2} {:.2},{:.2} {:.2},{:.2}" fill="none" stroke="{col}" stroke-width="{w:.2}"/>"#,
                a.x, a.y, b.x, a.y, b.x, b.y
            );
        } else {
            let _ = writeln!(
                out,
                r#"<line x1="{:.2}" y1="{:.2}" x2="{:.2}" y2="{:.2}" stroke="{col}" stroke-width="{w:.2}"/>"#,
                a.x, a.y, b.x, b.y
            );
        }
    }
    let radii = super::reduction::tree_disc_radii(t, right.width().min(right.height()));
    for (c, p) in pts.iter().enumerate() {
        let rad = if layout == ReducedLayout::InPlace {
            radii[c]
        } else {
            3.5
        };
        let _ = writeln!(
            out,
            r##"<circle cx="{:.2}" cy="{:.2}" r="{rad:.2}" fill="{}" stroke="#141414"/>"##,
            p.x,
            p.y,
            hex(colours.comps[c])
        );
    }
    if let Some(sc) = r.site_comp {
        let _ = writeln!(
            out,
            r#"<circle cx="{:.2}" cy="{:.2}" r="9" fill="none" stroke="{}" stroke-width="2.5"/>"#,
            pts[sc].x,
            pts[sc].y,
            hex(colour::SITE)
        );
    }
    if layout == ReducedLayout::InPlace {
        scale_bar(out, rproj, right);
    }
    text(
        out,
        right.left() + 10.0,
        right.top() + 20.0,
        15.0,
        "start",
        &format!("Reduced: {} compartments", t.len()),
    );
}

/// The heat scale's gradient with its range and label (or the label alone for categories).
fn svg_colour_bar(out: &mut String, s: &CellState, colours: &Colours, scale: &Scale) {
    if s.colour_by.is_continuous() {
        out.push_str("<defs><linearGradient id=\"heat\" x1=\"0\" x2=\"1\" y1=\"0\" y2=\"0\">\n");
        for i in 0..=16 {
            let t = i as f64 / 16.0;
            let _ = writeln!(
                out,
                r#"<stop offset="{:.4}" stop-color="{}"/>"#,
                t,
                hex(scale.at(t))
            );
        }
        out.push_str("</linearGradient></defs>\n");
        let (lo, hi) = colours.range;
        let x0 = 80.0;
        let bw = 400.0;
        let _ = writeln!(
            out,
            r#"<rect x="{x0}" y="18" width="{bw}" height="16" fill="url(#heat)"/>"#
        );
        text(out, x0 - 6.0, 31.0, 13.0, "end", &format!("{lo:.1}"));
        text(out, x0 + bw + 6.0, 31.0, 13.0, "start", &format!("{hi:.1}"));
        text(out, x0 + bw + 60.0, 31.0, 13.0, "start", &s.value_label());
    } else {
        text(out, 20.0, 31.0, 13.0, "start", &s.value_label());
    }
}

/// Cuts `region` (in points) out of a screenshot and encodes it as PNG.
pub fn png_of_region(image: &egui::ColorImage, region: Rect, ppp: f32) -> anyhow::Result<Vec<u8>> {
    let [w, h] = image.size;
    let x0 = ((region.left() * ppp).floor().max(0.0) as usize).min(w);
    let y0 = ((region.top() * ppp).floor().max(0.0) as usize).min(h);
    let x1 = ((region.right() * ppp).ceil().max(0.0) as usize).min(w);
    let y1 = ((region.bottom() * ppp).ceil().max(0.0) as usize).min(h);
    anyhow::ensure!(x1 > x0 && y1 > y0, "the figure is not on screen");
    let mut rgba = Vec::with_capacity((x1 - x0) * (y1 - y0) * 4);
    for y in y0..y1 {
        for x in x0..x1 {
            let c = image.pixels[y * w + x];
            rgba.extend_from_slice(&[c.r(), c.g(), c.b(), 255]);
        }
    }
    encode_png((x1 - x0) as u32, (y1 - y0) as u32, &rgba)
}

/// A PNG (RGBA, 8 bits) through the `png` crate at its balanced setting (row filters chosen
/// per image, fast deflate): a figure is mostly background, so it shrinks many times over.
pub fn encode_png(w: u32, h: u32, rgba: &[u8]) -> anyhow::Result<Vec<u8>> {
    let mut out = Vec::new();
    let mut enc = png::Encoder::new(&mut out, w, h);
    enc.set_color(png::ColorType::Rgba);
    enc.set_depth(png::BitDepth::Eight);
    enc.set_compression(png::Compression::Balanced);
    let mut writer = enc.write_header()?;
    writer.write_image_data(rgba)?;
    writer.finish()?;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn png_decodes_to_the_same_pixels_and_is_compressed() {
        // reference: the png crate's own decoder (a general-purpose library)
        let (w, h) = (640u32, 480u32);
        let mut px = Vec::with_capacity((w * h * 4) as usize);
        for y in 0..h {
            for x in 0..w {
                // a white figure with a few coloured lines, like a drawn cell
                let on = (x + 2 * y) % 97 < 3 || y == 240;
                let c = if on {
                    [200, 40, (x % 256) as u8, 255]
                } else {
                    [255; 4]
                };
                px.extend_from_slice(&c);
            }
        }
        let png_bytes = encode_png(w, h, &px).unwrap();
        assert!(png_bytes.len() < px.len() / 20, "{} bytes", png_bytes.len());
        let dec = png::Decoder::new(std::io::Cursor::new(&png_bytes));
        let mut reader = dec.read_info().unwrap();
        let mut buf = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut buf).unwrap();
        assert_eq!((info.width, info.height), (w, h));
        assert_eq!(info.color_type, png::ColorType::Rgba);
        assert_eq!(&buf[..info.buffer_size()], &px[..]);
    }
}
