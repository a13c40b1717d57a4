//! The desktop app driven through its real state and widgets (egui_kittest, no rendering): open
//! cells, click an injection point, move the sliders, save files to a temporary folder.
#![cfg(feature = "gui")]

use eframe::egui::{self, Pos2, Vec2};
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use pollard::app::files::{Dialogs, RecentFiles};
use pollard::app::{PollardApp, Screen, Start};

fn harness(app: PollardApp) -> Harness<'static, PollardApp> {
    Harness::builder()
        .with_size(Vec2::new(1500.0, 950.0))
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app)
}

fn app_with(answers: Vec<Option<std::path::PathBuf>>) -> PollardApp {
    let mut app = PollardApp::new(
        Start::Demo,
        Dialogs::scripted(answers),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    app
}

/// Lets background work finish, then draws until the frame is settled.
fn settle(h: &mut Harness<'static, PollardApp>) {
    h.state_mut().wait_idle();
    h.run_steps(3);
    h.state_mut().wait_idle();
    h.run_steps(2);
}

fn click_at(h: &mut Harness<'static, PollardApp>, p: Pos2) {
    h.event(egui::Event::PointerMoved(p));
    h.run_steps(1);
    for pressed in [true, false] {
        h.event(egui::Event::PointerButton {
            pos: p,
            button: egui::PointerButton::Primary,
            pressed,
            modifiers: Default::default(),
        });
        h.run_steps(1);
    }
}

#[test]
fn opens_on_the_demo_cell_and_draws_both_canvases() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let app = h.state();
    let s = app.state.as_ref().expect("a cell is loaded");
    assert!(
        s.cell.morph.len() > 100,
        "demo cell has {} points",
        s.cell.morph.len()
    );
    assert!(s.site.is_some(), "a default injection point is chosen");
    assert!(app.left.tessellations >= 1);
    h.get_by_label("Original arbor");
    h.get_by_label("Reduced tree");
}

#[test]
fn opening_a_sample_from_the_menu_replaces_the_cell() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let before = h.state().state.as_ref().unwrap().cell.morph.len();
    h.get_by_label("Samples").click();
    h.run_steps(2);
    h.get_by_label_contains("Stellate").click();
    h.run_steps(1);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert!(s.cell.name.contains("Stellate"), "{}", s.cell.name);
    assert_ne!(s.cell.morph.len(), before);
}

#[test]
fn clicking_a_point_makes_it_the_injection_point_and_recolours_without_retessellating() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let (target, p, tess_before, colour_before) = {
        let app = h.state();
        let s = app.state.as_ref().unwrap();
        let old = s.site.unwrap();
        // a point well inside the canvas, not the current injection point
        let rect = app.left.last_rect;
        let k = (1..s.cell.flat.len())
            .rev()
            .find(|&k| {
                k != old
                    && app
                        .left
                        .screen_of(k)
                        .is_some_and(|q| rect.shrink(30.0).contains(q))
            })
            .expect("a visible point");
        (
            k,
            app.left.screen_of(k).unwrap(),
            app.left.tessellations,
            s.colour_version,
        )
    };
    click_at(&mut h, p);
    h.run_steps(1);
    let app = h.state();
    let s = app.state.as_ref().unwrap();
    let site = s.site.expect("injection point set");
    // the nearest drawn point to the click is the injection point
    let q = app.left.screen_of(site).unwrap();
    assert!(q.distance(p) <= app.left.screen_of(target).unwrap().distance(p) + 1e-3);
    assert!(s.colour_version > colour_before);
    // the voltage ratio is 1 (0 dB) at the injection point and below 1 everywhere else (passive cable)
    let m = s.model.of_full[site] as usize;
    assert!(s.ln_from_site[m].abs() < 1e-9);
    assert!(s.ln_from_site.iter().all(|v| *v <= 1e-9));
    assert_eq!(
        app.left.tessellations, tess_before,
        "a click only recolours"
    );
}

#[test]
fn frequency_slider_changes_the_maps() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let dc_soma = {
        let s = h.state().state.as_ref().unwrap();
        s.ln_from_site[0]
    };
    h.get_by_role_and_label(egui::Role::Slider, "Frequency")
        .set_value_accesskit(200.0);
    h.run_steps(2);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert!((s.freq_hz - 200.0).abs() < 1.0, "{}", s.freq_hz);
    // a passive cable filters: the soma sees less of the injection point's voltage at 200 Hz than at DC
    // (Koch 1999 ch. 3, common knowledge)
    assert!(
        s.ln_from_site[0] < dc_soma,
        "{} vs {}",
        s.ln_from_site[0],
        dc_soma
    );
}

#[test]
fn budget_slider_moves_the_reduced_tree() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    assert!(
        h.state().state.as_ref().unwrap().reduction.is_some(),
        "the reduction is built in the background"
    );
    h.get_by_role_and_label(egui::Role::Slider, "Compartments")
        .set_value_accesskit(5.0);
    h.run_steps(2);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.budget, 5);
    let r = s.reduced.as_ref().expect("a reduced tree");
    assert!(r.tree.len() <= 5 && !r.tree.is_empty());
    h.get_by_role_and_label(egui::Role::Slider, "Compartments")
        .set_value_accesskit(12.0);
    h.run_steps(2);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.budget, 12);
    assert!(s.reduced.as_ref().unwrap().tree.len() > 5);
}

#[test]
fn exports_a_figure_and_the_reduced_tree_to_a_folder() {
    let dir = tempfile::tempdir().unwrap();
    let svg = dir.path().join("figure.svg");
    let json = dir.path().join("tree.json");
    let swc = dir.path().join("tree.swc");
    let nml = dir.path().join("tree.cell.nml");
    let mut h = harness(app_with(vec![
        Some(svg.clone()),
        Some(json.clone()),
        Some(swc.clone()),
        Some(nml.clone()),
    ]));
    settle(&mut h);
    h.get_by_label("Figure (SVG)…").click();
    h.run_steps(2);
    let text = std::fs::read_to_string(&svg).expect("figure written");
    assert!(text.starts_with("<svg"));
    assert!(text.trim_end().ends_with("</svg>"));
    assert!(text.contains("id=\"original\"") && text.contains("id=\"reduced\""));
    assert!(h.state().notice.as_deref().unwrap_or("").contains("Saved"));
    h.get_by_label("Reduced tree (JSON)…").click();
    h.run_steps(2);
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).expect("json written")).unwrap();
    let n = h
        .state()
        .state
        .as_ref()
        .unwrap()
        .reduced
        .as_ref()
        .unwrap()
        .tree
        .len();
    assert_eq!(j["compartments"].as_array().map(|a| a.len()), Some(n));
    h.get_by_label("Reduced tree (SWC)…").click();
    h.run_steps(2);
    let t = std::fs::read_to_string(&swc).expect("swc written");
    let m = pollard::Morphology::parse(&t, "tree.swc").expect("the saved SWC reads back");
    assert_eq!(m.len(), n);
    h.get_by_label("Reduced tree (NeuroML)…").click();
    h.run_steps(2);
    let x = std::fs::read_to_string(&nml).expect("NeuroML written");
    assert!(x.contains("<neuroml xmlns=\"http://www.neuroml.org/schema/neuroml2\""));
    assert_eq!(x.matches("<segment id=").count(), n);
}

#[test]
fn a_bad_file_shows_its_error_and_keeps_the_cell() {
    let dir = tempfile::tempdir().unwrap();
    let bad = dir.path().join("broken.swc");
    std::fs::write(&bad, "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 twenty 0 0 1 2\n").unwrap();
    let mut h = harness(app_with(vec![Some(bad.clone())]));
    settle(&mut h);
    let before = h.state().state.as_ref().unwrap().cell.name.clone();
    h.get_by_label("Open file…").click();
    h.run_steps(1);
    settle(&mut h);
    let app = h.state();
    let e = app.error.as_deref().expect("an error is shown");
    assert!(e.contains("broken.swc"), "{e}");
    assert!(e.contains('3'), "names the line: {e}");
    assert_eq!(app.state.as_ref().unwrap().cell.name, before);
}

#[test]
fn a_file_with_warnings_lists_them() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("two_trees.swc");
    std::fs::write(
        &f,
        "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 0 0 1 2\n10 3 100 0 0 1 -1\n11 3 110 0 0 1 10\n",
    )
    .unwrap();
    let mut h = harness(app_with(vec![Some(f.clone())]));
    h.get_by_label("Open file…").click();
    h.run_steps(1);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.cell.name, "two_trees.swc");
    assert!(!s.cell.warnings.is_empty());
    h.get_by_label_contains("Warnings (");
    assert_eq!(h.state().recent.list.len(), 1);
}

#[test]
fn lab_toggle_switches_screens() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    h.get_by_label("Branching lab").click();
    h.run_steps(2);
    assert_eq!(h.state().screen, Screen::Lab);
    h.get_by_label("Cell view").click();
    h.run_steps(2);
    assert_eq!(h.state().screen, Screen::Cell);
    let app = PollardApp::new(
        Start::Lab,
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    assert_eq!(app.screen, Screen::Lab);
}

#[test]
fn colouring_choices_and_views_do_not_panic() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    for label in [
        "Voltage at the soma, current at each point",
        "Local input resistance",
        "Strahler order",
        "Neurite type",
        "Voltage, current at the injection point",
    ] {
        h.get_by_label(label).click();
        h.run_steps(2);
    }
    for label in [
        "Side",
        "Top",
        "Front",
        "Reset",
        "as a dendrogram",
        "in place",
        "Np",
    ] {
        h.get_by_label(label).click();
        h.run_steps(2);
    }
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.unit, pollard::app::state::LogUnit::Neper);
}

#[test]
fn a_file_without_radii_still_opens_and_says_so() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("skeleton.swc");
    std::fs::write(
        &f,
        "1 1 0 0 0 0 -1\n2 3 10 0 0 0 1\n3 3 20 5 0 0 2\n4 3 20 -5 0 0 2\n",
    )
    .unwrap();
    let mut h = harness(app_with(vec![Some(f.clone())]));
    h.get_by_label("Open file…").click();
    h.run_steps(1);
    settle(&mut h);
    let app = h.state();
    assert!(app.error.is_none(), "{:?}", app.error);
    let s = app.state.as_ref().unwrap();
    assert_eq!(s.cell.name, "skeleton.swc");
    assert!(
        s.cell
            .warnings
            .iter()
            .any(|w| w.contains("no usable radius")),
        "{:?}",
        s.cell.warnings
    );
    assert!(s.elec.input_mohm.iter().all(|r| r.is_finite() && *r > 0.0));
}

#[test]
fn hovering_shows_facts_about_points_and_compartments() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let (p, q) = {
        let app = h.state();
        let s = app.state.as_ref().unwrap();
        let rect = app.left.last_rect.shrink(30.0);
        let k = (1..s.cell.flat.len())
            .find(|&k| app.left.screen_of(k).is_some_and(|q| rect.contains(q)))
            .unwrap();
        (
            app.left.screen_of(k).unwrap(),
            app.right.screen_of_comp(0).unwrap(),
        )
    };
    h.event(egui::Event::PointerMoved(p));
    h.run_steps(2);
    let hovered = h.state().left.hovered.expect("a point under the pointer");
    let text = h.state().state.as_ref().unwrap().describe_node(hovered);
    for word in ["path distance", "input resistance", "to the soma"] {
        assert!(text.contains(word), "{text}");
    }
    h.event(egui::Event::PointerMoved(q));
    h.run_steps(2);
    let c = h
        .state()
        .right
        .hovered
        .expect("a compartment under the pointer");
    let text = h.state().state.as_ref().unwrap().describe_comp(c);
    for word in ["leak conductance", "capacitance", "area", "stands for"] {
        assert!(text.contains(word), "{text}");
    }
}

#[test]
fn switching_off_the_axon_rebuilds_model_and_reduction_without_it() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let n_before = h.state().state.as_ref().unwrap().model.points;
    h.get_by_label("Axon").click();
    h.run_steps(1);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.kept.get(&2), Some(&false));
    assert!(s.model.points < n_before);
    assert!(
        s.model.flat.kind.iter().all(|&k| k != 2),
        "no axon node in the model"
    );
    let r = s.reduced.as_ref().expect("the reduction is rebuilt");
    assert!(
        r.tree.compartments.iter().all(|c| c.swc_type != 2),
        "no axon compartment"
    );
    // every model node maps to a compartment of the rebuilt tree
    assert!(
        r.extras
            .node_comp
            .iter()
            .all(|&c| (c as usize) < r.tree.len())
    );
}

#[derive(Debug)]
struct Dropped(std::path::PathBuf);

impl egui::DroppedFile for Dropped {
    fn path(&self) -> &std::path::Path {
        &self.0
    }
    fn bytes(&self) -> Result<Vec<u8>, String> {
        std::fs::read(&self.0).map_err(|e| e.to_string())
    }
}

#[test]
fn dropping_a_file_on_the_window_opens_it() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("dropped.swc");
    std::fs::write(
        &f,
        "1 1 0 0 0 5 -1\n2 3 10 0 0 1 1\n3 3 20 5 0 0.5 2\n4 3 20 -5 0 0.5 2\n",
    )
    .unwrap();
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    h.input_mut()
        .dropped_files
        .push(std::sync::Arc::new(Dropped(f.clone())));
    h.run_steps(1);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.cell.name, "dropped.swc");
    assert_eq!(s.cell.morph.len(), 4);
}

#[test]
fn start_options_set_budget_injection_point_frequency_colouring_and_layout() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("y.swc");
    std::fs::write(
        &f,
        "1 1 0 0 0 5 -1\n2 3 50 0 0 1 1\n3 3 100 40 0 0.5 2\n4 3 100 -40 0 0.5 2\n5 3 150 60 0 0.4 3\n6 3 150 20 0 0.4 3\n",
    )
    .unwrap();
    let mut app = PollardApp::new(
        Start::File(f.clone()),
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    app.start_options = Some(pollard::app::StartOptions {
        budget: Some(3),
        injection_point_id: Some(4),
        freq_hz: Some(50.0),
        colour_by: Some(pollard::app::state::ColourBy::ToSoma),
        dendrogram: true,
        epsp_curve: true,
        save_png: None,
        ..Default::default()
    });
    app.wait_idle();
    assert!(app.sweeper.wanted);
    let s = app.state.as_ref().unwrap();
    assert_eq!(s.cell.name, "y.swc");
    let site = s.site.unwrap();
    assert_eq!(
        s.cell.morph.points[s.cell.flat.node_point[site] as usize].id,
        4
    );
    assert_eq!(s.freq_hz, 50.0);
    assert_eq!(s.colour_by, pollard::app::state::ColourBy::ToSoma);
    assert_eq!(app.layout, pollard::app::canvas::ReducedLayout::Dendrogram);
    assert!(s.reduced.as_ref().unwrap().tree.len() <= 3);
}

#[test]
fn view_file_loads_only_that_file_and_falls_back_to_the_demo_on_failure() {
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("one.swc");
    std::fs::write(&f, "1 1 0 0 0 5 -1\n2 3 50 0 0 1 1\n").unwrap();
    let mut app = PollardApp::new(
        Start::File(f.clone()),
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    // the file is the first and only load: no demo cell is read before it
    assert!(app.state.is_none() && app.busy());
    app.wait_idle();
    assert_eq!(app.state.as_ref().unwrap().cell.name, "one.swc");
    // a file that cannot be read: the demo cell opens, and the error stays on screen
    let mut app = PollardApp::new(
        Start::File(dir.path().join("missing.swc")),
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    assert!(app.state.is_some());
    assert!(
        app.error
            .as_deref()
            .is_some_and(|e| e.contains("missing.swc")),
        "{:?}",
        app.error
    );
}

/// The injection point's morphology point, the budget, and the soma traces (full cell, reduced tree) shown.
fn shown_traces(h: &Harness<'static, PollardApp>) -> (u32, usize, Vec<f64>, Vec<f64>) {
    let sh = h.state().traces.shown.as_ref().expect("traces are shown");
    (
        sh.point,
        sh.budget,
        sh.full.soma_mv.clone(),
        sh.reduced.soma_mv.clone(),
    )
}

fn peak(v: &[f64]) -> f64 {
    v.iter().fold(0.0f64, |m, x| m.max(x.abs()))
}

#[test]
fn response_traces_follow_the_click_and_the_budget() {
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let (p0, b0, full0, red0) = shown_traces(&h);
    {
        let s = h.state().state.as_ref().unwrap();
        assert_eq!(p0, s.cell.flat.node_point[s.site.unwrap()]);
        assert_eq!(b0, s.budget);
        // an inward current depolarises the soma, and a passive dendrite delays the soma's peak
        // past the current's own peak at t = τ = 0.5 ms (Rall 1967; common knowledge)
        let sh = h.state().traces.shown.as_ref().unwrap();
        let (v, t) = sh.full.soma_peak();
        assert!(v > 0.0 && t > 0.5, "peak {v} mV at {t} ms");
    }
    h.get_by_label_contains("peak: reduced");

    // the budget slider: the reduced trace changes, the full cell's is the one kept
    h.get_by_role_and_label(egui::Role::Slider, "Compartments")
        .set_value_accesskit(3.0);
    h.run_steps(2);
    settle(&mut h);
    let (p1, b1, full1, red1) = shown_traces(&h);
    assert_eq!((p1, b1), (p0, 3));
    assert_eq!(
        full1, full0,
        "the full cell's trace does not depend on the budget"
    );
    let (a, b) = (peak(&red0), peak(&red1));
    assert!((a / b).ln().abs() > 1e-3, "reduced peaks {a} vs {b} mV");

    // a click on another point: the traces are that injection point's
    let p = {
        let app = h.state();
        let s = app.state.as_ref().unwrap();
        let rect = app.left.last_rect.shrink(30.0);
        // the visible point nearest the soma (the old injection point is the farthest tip)
        let k = (1..s.cell.flat.len())
            .filter(|&k| s.model.of_full[k] != pollard::morphology::NONE)
            .filter(|&k| app.left.screen_of(k).is_some_and(|q| rect.contains(q)))
            .min_by(|&a, &b| {
                let d = |k: usize| s.model.path_distance[s.model.of_full[k] as usize];
                d(a).total_cmp(&d(b))
            })
            .expect("a visible point");
        app.left.screen_of(k).unwrap()
    };
    click_at(&mut h, p);
    settle(&mut h);
    let (p2, _, full2, _) = shown_traces(&h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(p2, s.cell.flat.node_point[s.site.unwrap()]);
    assert_ne!(p2, p0);
    let (a, b) = (peak(&full0), peak(&full2));
    assert!(
        (a / b).ln().abs() > 1e-2,
        "soma peaks {a} (far tip) vs {b} mV (near the soma)"
    );
}

/// The first painted text that starts with `prefix` (fails the test if there is none).
fn text_starting(texts: &[(String, egui::Rect)], prefix: &str) -> (String, egui::Rect) {
    texts
        .iter()
        .find(|(t, _)| t.starts_with(prefix))
        .unwrap_or_else(|| panic!("no text {prefix:?} painted"))
        .clone()
}

/// Every text the frame painted, with its screen rectangle (egui_plot paints tick labels and axis
/// titles as text shapes, not widgets, so they are read from the frame's shapes).
fn painted_texts(h: &Harness<'static, PollardApp>) -> Vec<(String, egui::Rect)> {
    let mut out = Vec::new();
    let mut stack: Vec<&egui::Shape> = h.output().shapes.iter().map(|c| &c.shape).collect();
    while let Some(shape) = stack.pop() {
        match shape {
            egui::Shape::Vec(v) => stack.extend(v.iter()),
            egui::Shape::Text(t) => {
                let r = t.galley.rect.translate(t.pos.to_vec2());
                out.push((t.galley.text().to_string(), r))
            }
            _ => {}
        }
    }
    out
}

/// A plot's x-axis title (the painted text starting with `title`) and its tick labels (value,
/// rectangle), left to right: the numbers on the lowest line above the title within the plot's
/// column (the columns are equal, so a column ends halfway to the `neighbour` plot's axis title;
/// the y axis's labels sit higher, centred on their grid lines inside the frame's height).
fn axis_ticks(
    h: &Harness<'static, PollardApp>,
    title: &str,
    neighbour: &str,
) -> (String, Vec<(f64, egui::Rect)>) {
    let texts = painted_texts(h);
    let find = |prefix: &str| text_starting(&texts, prefix);
    let (title, tr) = find(title);
    let (_, nr) = find(neighbour);
    let half = (nr.center().x - tr.center().x).abs() / 2.0;
    let numbers: Vec<(f64, egui::Rect)> = texts
        .iter()
        .filter(|(_, r)| {
            (r.center().x - tr.center().x).abs() < half && r.bottom() <= tr.top() + 1.0
        })
        .filter_map(|(t, r)| Some((t.replace('\u{2212}', "-").parse::<f64>().ok()?, *r)))
        .collect();
    let line = numbers
        .iter()
        .map(|n| n.1.top())
        .fold(f32::NEG_INFINITY, f32::max);
    let mut ticks: Vec<(f64, egui::Rect)> = numbers
        .into_iter()
        .filter(|n| (n.1.top() - line).abs() < 0.5)
        .collect();
    ticks.sort_by(|a, b| a.1.left().total_cmp(&b.1.left()));
    (title, ticks)
}

const DISTANCE: &str = "path distance from the soma";
const COMPARTMENTS: &str = "compartments";
const SHOLL: &str = "distance from the soma centre";

/// The attenuation plot's path-distance axis: title and ticks.
fn distance_axis(h: &Harness<'static, PollardApp>) -> (String, Vec<(f64, egui::Rect)>) {
    axis_ticks(h, DISTANCE, COMPARTMENTS)
}

/// Ticks read: at least `least` labels from 0 at one even step, none overlapping. Returns them.
fn assert_readable_ticks(title: &str, ticks: &[(f64, egui::Rect)], least: usize) -> Vec<f64> {
    let values: Vec<f64> = ticks.iter().map(|t| t.0).collect();
    assert!(ticks.len() >= least, "{title}: tick labels {values:?}");
    assert_eq!(values[0], 0.0, "{title}: {values:?}");
    let step = values[1] - values[0];
    for (w, r) in values.windows(2).zip(ticks.windows(2)) {
        assert!(
            (w[1] - w[0] - step).abs() < 1e-9 * step,
            "{title}: {values:?}"
        );
        assert!(r[0].1.right() < r[1].1.left(), "labels overlap: {ticks:?}");
    }
    values
}

/// A synthetic cell of `n` points written to `dir`, opened as by `pollard view FILE`, drawn in a
/// window of `size`.
fn open_synthetic(dir: &std::path::Path, n: usize, size: Vec2) -> Harness<'static, PollardApp> {
    let f = dir.join(format!("synth{n}.swc"));
    let text = pollard::synth::to_swc(&pollard::synth::big_cell(n, 1), &[]);
    std::fs::write(&f, text).unwrap();
    let mut app = PollardApp::new(
        Start::File(f),
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    let mut h = Harness::builder()
        .with_size(size)
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app);
    settle(&mut h);
    h
}

/// The three plots' x axes read (at least `least` labels each); the distance axis's title names
/// its unit and its labels reach at least halfway to the farthest point.
fn assert_readable_axes(h: &Harness<'static, PollardApp>, least: usize) {
    let (title, ticks) = distance_axis(h);
    let um = match title.as_str() {
        "path distance from the soma (µm)" => 1.0,
        "path distance from the soma (mm)" => 1000.0,
        t => panic!("the axis title names no unit: {t:?}"),
    };
    let values = assert_readable_ticks(&title, &ticks, least);
    let s = h.state().state.as_ref().unwrap();
    let far = s.model.path_distance.iter().copied().fold(0.0, f64::max);
    assert!(
        values[values.len() - 1] * um >= 0.5 * far,
        "{values:?} {title}; farthest {far} µm"
    );
    for (t, n) in [(COMPARTMENTS, SHOLL), (SHOLL, COMPARTMENTS)] {
        let (title, ticks) = axis_ticks(h, t, n);
        assert_readable_ticks(&title, &ticks, least);
    }
}

#[test]
fn path_distance_axis_has_readable_ticks_on_a_large_cell_in_a_narrow_plot() {
    // In a 1280 × 800 window the attenuation plot was about 60 px wide (the traces panel beside
    // the plots took 670 px; it now takes at most 40 % of the width) and in 1600 × 1000 about
    // 150 px. On this cell (farthest point 1,956 µm from the soma) egui_plot's own powers-of-ten
    // ticks showed only "0" in the narrow plot (labels closer than 60 px are hidden), and only
    // "0" under the error curve's 4,000 compartments.
    let dir = tempfile::tempdir().unwrap();
    let narrow = Vec2::new(1280.0, 800.0);
    let usual = Vec2::new(1600.0, 1000.0);
    for size in [narrow, usual] {
        let h = open_synthetic(dir.path(), 100_000, size);
        assert_readable_axes(&h, 3);
        assert_eq!(distance_axis(&h).0, "path distance from the soma (mm)");
    }
    // the demo cell (farthest point a few hundred µm away) keeps µm
    for size in [narrow, usual] {
        let mut h = Harness::builder()
            .with_size(size)
            .with_max_steps(200)
            .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app_with(vec![]));
        settle(&mut h);
        assert_readable_axes(&h, 3);
        assert_eq!(distance_axis(&h).0, "path distance from the soma (µm)");
    }
}

/// The traces plot's y-axis title and tick labels (the numbers left of its frame: inside the
/// traces panel, below its title, above the time axis's tick line).
fn traces_y_axis(h: &Harness<'static, PollardApp>) -> (String, Vec<String>) {
    let texts = painted_texts(h);
    let find = |prefix: &str| text_starting(&texts, prefix);
    let (_, panel) = find("Soma voltage for a brief");
    let (_, time) = find("time (ms)");
    let numeric = |t: &str| t.replace('\u{2212}', "-").parse::<f64>().is_ok();
    let in_panel: Vec<&(String, egui::Rect)> = texts
        .iter()
        .filter(|(t, r)| numeric(t) && r.left() >= panel.left() - 2.0 && r.top() > panel.bottom())
        .filter(|(_, r)| r.bottom() <= time.top() + 1.0)
        .collect();
    // the time axis's labels are the lowest line; the y axis's sit above it
    let x_line = in_panel
        .iter()
        .map(|(_, r)| r.top())
        .fold(f32::NEG_INFINITY, f32::max);
    let labels = in_panel
        .iter()
        .filter(|(_, r)| (r.top() - x_line).abs() > 0.5)
        .map(|(t, _)| t.clone())
        .collect();
    let title = texts
        .iter()
        .find(|(t, _)| t.contains("above rest"))
        .map(|(t, _)| t.clone())
        .unwrap_or_default();
    (title, labels)
}

#[test]
fn traces_on_a_large_cell_have_short_labels_and_no_peak_error_for_a_rising_trace() {
    // On this cell the default injection point is a far tip (−110 dB to the soma): the soma's
    // response is about 0.7 nV and peaks after 70 ms. The panel ran 40 ms, quoted a peak error of
    // +305 % for two traces still rising at 40 ms, and labelled its y axis in mV ("0.0000007").
    let dir = tempfile::tempdir().unwrap();
    let h = open_synthetic(dir.path(), 100_000, Vec2::new(1280.0, 800.0));
    let (title, labels) = traces_y_axis(&h);
    let unit = ["mV", "µV", "nV", "pV"]
        .into_iter()
        .find(|u| title.ends_with(&format!("({u})")))
        .unwrap_or_else(|| panic!("the voltage axis names no unit: {title:?}"));
    assert!(labels.len() >= 3, "{title}: {labels:?}");
    for l in &labels {
        assert!(l.chars().count() <= 4, "{title}: label {l:?} of {labels:?}");
    }
    let sh = h.state().traces.shown.as_ref().expect("traces are shown");
    let (v, t) = sh.full.soma_peak();
    assert!(v > 0.0 && v < 1e-3, "soma peak {v} mV, shown in {unit}");
    // the run lasts until both have peaked, and then the error is quoted
    assert!(
        sh.full.soma_peaked() && sh.reduced.soma_peaked(),
        "cell peak at {t} ms"
    );
    assert!(
        t > 40.0 && t < sh.full.end_ms(),
        "{t} ms, run {} ms",
        sh.full.end_ms()
    );
    assert!(sh.peak_error_np().is_some_and(f64::is_finite));
    h.get_by_label_contains("peak: reduced");

    // a run cut short (10 ms): no peak error, a plain note instead
    let f = dir.path().join("synth100000.swc");
    let mut app = PollardApp::new(
        Start::File(f),
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    app.traces.opts.duration_ms = 10.0;
    app.wait_idle();
    let mut h = Harness::builder()
        .with_size(Vec2::new(1280.0, 800.0))
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app);
    settle(&mut h);
    let sh = h.state().traces.shown.as_ref().expect("traces are shown");
    assert!(!sh.full.soma_peaked() && sh.peak_error_np().is_none());
    assert!(h.query_by_label_contains("peak: reduced").is_none());
    h.get_by_label_contains("no peak to compare: both soma traces are still rising at 10 ms");
}

#[test]
fn a_budget_change_shows_the_fitted_tree_then_its_timed_polish_and_the_traces_follow() {
    use pollard::fidelity::{
        Fidelity, FidelityOptions, TraceOptions, UntilPeaked, reduced_tree_traces,
    };
    use pollard::reduce::{CapacitanceRule, ReduceOptions, Reducer};
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    // reference: the library's reducer (default rule, timed), its tree as built (fitted) and
    // finished as `pollard reduce` finishes it (default fidelity options)
    let (fitted, timed) = {
        let s = h.state().state.as_ref().unwrap();
        assert_eq!(
            s.capacitance,
            CapacitanceRule::Timed,
            "timed is the default"
        );
        let r = Reducer::new(&s.model.flat, &s.params, &ReduceOptions::default()).unwrap();
        let fitted = r.tree(15);
        let mut timed = fitted.clone();
        Fidelity::new(&r, &FidelityOptions::default())
            .unwrap()
            .apply_capacitance_rule(&mut timed)
            .unwrap();
        (fitted, timed)
    };
    let caps = |t: &pollard::reduce::ReducedTree| -> Vec<f64> {
        t.compartments.iter().map(|c| c.capacitance_pf).collect()
    };
    let conductances = |t: &pollard::reduce::ReducedTree| -> Vec<(f64, f64)> {
        t.compartments
            .iter()
            .map(|c| (c.g_axial_ns, c.g_leak_ns))
            .collect()
    };
    assert_ne!(caps(&timed), caps(&fitted), "the polish moves capacitances");
    assert_ne!(
        timed.point_compartment, fitted.point_compartment,
        "the timed rule serves some points by a neighbour here"
    );
    h.get_by_role_and_label(egui::Role::Slider, "Compartments")
        .set_value_accesskit(15.0);
    h.run_steps(1);
    {
        // at once: the fitted tree, not yet finished
        let r = h.state().state.as_ref().unwrap().reduced.as_ref().unwrap();
        assert!(!r.finished);
        assert_eq!(caps(&r.tree), caps(&fitted));
    }
    h.run_steps(1);
    h.get_by_label_contains("timing polish");
    // poll until the polish arrives (the test's own loop, at most a minute)
    let start = std::time::Instant::now();
    while !h
        .state()
        .state
        .as_ref()
        .unwrap()
        .reduced
        .as_ref()
        .unwrap()
        .finished
    {
        assert!(start.elapsed().as_secs() < 60, "the polish never arrived");
        std::thread::sleep(std::time::Duration::from_millis(20));
        h.run_steps(1);
    }
    settle(&mut h);
    assert!(h.query_by_label_contains("timing polish").is_none());
    let s = h.state().state.as_ref().unwrap();
    let shown = &s.reduced.as_ref().unwrap().tree;
    assert_eq!(conductances(shown), conductances(&fitted));
    assert_ne!(caps(shown), caps(&fitted));
    assert_eq!(caps(shown), caps(&timed));
    assert_eq!(shown.point_compartment, timed.point_compartment);
    // the drawing follows the finished tree's point map (the rule may serve points elsewhere)
    let red = s.reduced.as_ref().unwrap();
    for (k, &c) in red.extras.node_comp.iter().enumerate() {
        let p = s.model.flat.node_point[k] as usize;
        assert_eq!(c, shown.point_compartment[p], "model node {k}");
    }
    // the traces shown are the polished tree's: the reduced half against the library's own run
    // of the reference timed tree (and not the fitted one's)
    let tr = h.state().traces.shown.as_ref().expect("traces are shown");
    assert_eq!(tr.budget, 15);
    let o = h.state().traces.opts;
    let o = TraceOptions {
        until_peaked: o.until_peaked.map(|u| UntilPeaked {
            min_ms: u.min_ms.max(tr.full.end_ms()),
            ..u
        }),
        ..o
    };
    let input = pollard::app::traces::INPUT;
    let (_, want) = reduced_tree_traces(&timed, tr.point, &input, &o).unwrap();
    let (_, other) = reduced_tree_traces(&fitted, tr.point, &input, &o).unwrap();
    assert_eq!(tr.reduced.soma_mv, want.soma_mv);
    assert_ne!(tr.reduced.soma_mv, other.soma_mv);
    h.get_by_label_contains("peak: reduced");

    // the rule is a choice: fitted shows the reducer's tree, finished at once
    h.get_by_label("fitted").click();
    h.run_steps(1);
    settle(&mut h);
    let s = h.state().state.as_ref().unwrap();
    assert_eq!(s.capacitance, CapacitanceRule::Fitted);
    let r = s.reduced.as_ref().unwrap();
    assert!(r.finished);
    assert_eq!(caps(&r.tree), caps(&fitted));
    assert!(h.state().error.is_none(), "{:?}", h.state().error);
}

#[test]
fn the_epsp_curve_is_measured_on_request_and_drawn_in_the_error_plot() {
    use pollard::fidelity::{Fidelity, FidelityOptions, default_budgets};
    let mut h = harness(app_with(vec![]));
    settle(&mut h);
    let legend = |h: &Harness<'static, PollardApp>| {
        painted_texts(h).iter().any(|(t, _)| t == "EPSP peak, p95")
    };
    assert!(!legend(&h), "not measured before it is asked for");
    h.get_by_label("EPSP error too").click();
    h.run_steps(2);
    // background work the window does not wait for: poll until it arrives
    let start = std::time::Instant::now();
    loop {
        let app = h.state();
        if app.sweeper.curve(app.state.as_ref().unwrap()).is_some() {
            break;
        }
        assert!(
            start.elapsed().as_secs() < 600,
            "no EPSP curve after 10 minutes"
        );
        h.state_mut().poll();
        std::thread::sleep(std::time::Duration::from_millis(10));
    }
    h.run_steps(3);
    assert!(legend(&h), "the EPSP line is drawn once measured");
    // reference: the library's sweep of the same reducer, from a run of its own
    let app = h.state();
    let s = app.state.as_ref().unwrap();
    let curve = app.sweeper.curve(s).unwrap().to_vec();
    let r = s.reduction.as_ref().unwrap().reducer();
    let fid = Fidelity::new(r, &FidelityOptions::default()).unwrap();
    let want = fid
        .budget_sweep(r, &default_budgets(r.max_compartments()), None)
        .unwrap();
    let want: Vec<[f64; 2]> = want
        .iter()
        .map(|w| [w.compartments as f64, w.report.epsp_peak_error_np.p95])
        .collect();
    assert_eq!(curve, want);
    assert_eq!(curve[0][0], 1.0);
    assert_eq!(curve.last().unwrap()[0], r.max_compartments() as f64);
    // unticked: the line goes
    h.get_by_label_contains("EPSP error too").click();
    h.run_steps(3);
    assert!(!legend(&h));
}
