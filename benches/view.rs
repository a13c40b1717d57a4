//! The desktop view's CPU work after a click on a 100,000-point cell: solve the voltage map from
//! the new site, colour every point and compartment, and rewrite the cached mesh's colours
//! (goal: well inside one 60 Hz frame, 16.7 ms). Also the full tessellation after a camera
//! change, the budget slider's step and a membrane-parameter change.

#[cfg(feature = "gui")]
mod gui {
    use criterion::Criterion;
    use eframe::egui::{Pos2, Rect, Vec2};
    use pollard::app::canvas::{ArborCanvas, Camera, Side};
    use pollard::app::colour::{Scale, colours};
    use pollard::app::state::{Cell, CellState};
    use pollard::cable::Params;
    use pollard::swc::SwcFile;
    use std::hint::black_box;
    use std::sync::Arc;

    fn big_state(n: usize) -> CellState {
        let file = SwcFile {
            source: "big".into(),
            points: pollard::synth::big_cell(n, 1),
            header: Vec::new(),
            warnings: Vec::new(),
        };
        let m = pollard::Morphology::from_swc(file).expect("generated cell");
        let cell = Arc::new(Cell::new("big".into(), None, m));
        CellState::new(cell, Params::default(), 0.0).expect("maps")
    }

    pub fn view(c: &mut Criterion) {
        let mut s = big_state(100_000);
        let red = pollard::app::state::build_reduction(&s.cell, None, &s.params);
        s.set_reduction(red);
        s.set_budget(255);
        let scale = Scale::new();
        let rect = Rect::from_min_size(Pos2::ZERO, Vec2::new(900.0, 800.0));
        let mut cam = Camera::default();
        let mut canvas = ArborCanvas::new(Side::Original);
        let col = colours(&s, &scale);
        canvas.prepare(&s, &col, &cam, rect, 1.2);
        let n = s.cell.flat.len();
        let sites: Vec<usize> = (1..n).step_by((n / 64).max(1)).collect();
        let mut g = c.benchmark_group("view");
        g.sample_size(30);
        let mut i = 0;
        g.bench_function(
            "recolour after a click, 100k points (solve + colour + mesh)",
            |b| {
                b.iter(|| {
                    i += 1;
                    s.set_site(Some(sites[i % sites.len()]));
                    let col = colours(&s, &scale);
                    canvas.prepare(&s, &col, &cam, rect, 1.2);
                    black_box(canvas.tessellations);
                })
            },
        );
        let col = colours(&s, &scale);
        g.bench_function("tessellate after a camera change, 100k points", |b| {
            b.iter(|| {
                cam.yaw += 0.01;
                canvas.prepare(&s, &col, &cam, rect, 1.2);
                black_box(canvas.tessellations);
            })
        });
        g.bench_function(
            "budget slider step, 100k points (replay + reduced maps)",
            |b| {
                let mut k = 0;
                b.iter(|| {
                    k += 1;
                    s.set_budget(if k % 2 == 0 { 255 } else { 127 });
                    black_box(s.reduced.as_ref().map(|r| r.tree.len()));
                })
            },
        );
        let p0 = s.params;
        g.bench_function(
            "membrane resistance change, 100k points (maps rebuilt)",
            |b| {
                let mut k = 0;
                b.iter(|| {
                    k += 1;
                    let mut p = p0;
                    p.rm_ohm_cm2 += (k % 2) as f64 * 100.0;
                    s.set_electrical(p, 0.0).expect("valid parameters");
                    black_box(s.elec.input_mohm[0]);
                })
            },
        );
        g.finish();
    }
}

#[cfg(feature = "gui")]
criterion::criterion_group!(benches, gui::view);
#[cfg(feature = "gui")]
criterion::criterion_main!(benches);

#[cfg(not(feature = "gui"))]
fn main() {
    eprintln!("the view benchmark needs the gui feature");
}
