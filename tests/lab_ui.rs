//! The branching lab's window, driven through egui_kittest: choose each lesson, move a slider,
//! check that the plotted numbers move the way cable theory says they must.
#![cfg(feature = "gui")]

use eframe::egui;
use egui::accesskit::Role;
use egui_kittest::Harness;
use egui_kittest::kittest::Queryable;
use pollard::app::lab::{LabView, Preset};
use pollard::lab::End;

fn harness() -> Harness<'static, LabView> {
    Harness::builder()
        .with_size(egui::Vec2::new(1560.0, 960.0))
        .build_ui_state(|ui, lab: &mut LabView| lab.ui(ui), LabView::new())
}

fn choose(h: &mut Harness<'static, LabView>, p: Preset) {
    // the lesson list comes first; the chosen lesson's title repeats the label
    h.get_all_by_label(p.label()).next().unwrap().click();
    h.run();
    assert_eq!(h.state().preset, Some(p));
    assert!(h.state().error().is_none(), "{:?}", h.state().error());
}

fn set_slider(h: &mut Harness<'static, LabView>, label: &str, value: f64) {
    h.get_by_role_and_label(Role::Slider, label)
        .set_value_accesskit(value);
    h.run();
}

/// V/V_soma at the first fork on the path, for current at the soma.
fn fork_transfer(lab: &LabView) -> f64 {
    let r = lab.result().unwrap();
    let j = r.junctions.iter().find(|j| j.on_path).unwrap();
    let i = r.path.nodes.iter().position(|&k| k == j.node).unwrap();
    r.path.v_from_soma[i]
}

#[test]
fn thin_daughters_pass_the_soma_signal_and_block_the_tip_signal() {
    let mut h = harness();
    choose(&mut h, Preset::ThickDaughters);
    choose(&mut h, Preset::ThinDaughters);
    let thin = fork_transfer(h.state());
    let r = h.state().result().unwrap();
    // Rall & Rinzel 1973: attenuation towards the soma far exceeds the reverse
    assert!(r.att_tip_to_soma > 2.0 * r.att_soma_to_tip);
    assert!(r.junctions[0].ratio < 0.5);
    // thicker daughters load the fork more: less of the soma's voltage reaches it
    // (V_fork/V_soma = 1/(cosh L + (G_L/Y0) sinh L); Rall 1959)
    set_slider(&mut h, "Daughters diameter (µm)", 2.5);
    assert!((h.state().spec.level[1].diam_um - 2.5).abs() < 1e-9);
    let thick = fork_transfer(h.state());
    assert!(thin > thick, "{thin} vs {thick}");
    assert!(h.state().result().unwrap().junctions[0].ratio > 0.5);
}

#[test]
fn thick_daughters_lose_their_grip_when_thinned() {
    let mut h = harness();
    choose(&mut h, Preset::ThickDaughters);
    let before = fork_transfer(h.state());
    assert!(h.state().result().unwrap().junctions[0].ratio > 2.0);
    set_slider(&mut h, "Daughters diameter (µm)", 0.5);
    let after = fork_transfer(h.state());
    assert!(after > before, "{after} vs {before}");
}

#[test]
fn rall_tree_matches_its_cylinder_until_a_diameter_moves() {
    let mut h = harness();
    choose(&mut h, Preset::RallTree);
    let e = h.state().result().unwrap().equivalent.clone();
    assert!(e.qualifies(), "{:?}", e.reasons);
    // Rall 1962: tree, cylinder through the engine and cylinder closed form agree
    assert!((e.rin_tree_mohm - e.rin_closed_mohm).abs() < 1e-6 * e.rin_closed_mohm);
    assert!((e.rin_cylinder_mohm - e.rin_closed_mohm).abs() < 1e-6 * e.rin_closed_mohm);
    for j in &h.state().result().unwrap().junctions {
        assert!((j.ratio - 1.0).abs() < 1e-9, "{}", j.ratio);
    }
    set_slider(&mut h, "Level 1 diameter (µm)", 2.6);
    let r = h.state().result().unwrap();
    assert!(!r.equivalent.qualifies());
    assert!(r.junctions[0].ratio > 1.1);
}

#[test]
fn killed_end_drains_and_sealed_end_holds() {
    let mut h = harness();
    choose(&mut h, Preset::SealedKilled);
    assert_eq!(h.state().spec.end, End::Killed);
    let killed = h.state().series().unwrap().clone();
    assert_eq!(*killed.v_from_soma.last().unwrap(), 0.0);
    // the dashed comparison is the same cable sealed: V(L)/V(0) = 1/cosh L (Rall 1959)
    let (what, other) = h.state().series_compare().unwrap();
    assert_eq!(what, "sealed end");
    let big_l = *other.x.last().unwrap();
    assert!((other.v_from_soma.last().unwrap() - 1.0 / big_l.cosh()).abs() < 1e-9);
    h.get_by_label("Sealed").click();
    h.run();
    assert_eq!(h.state().spec.end, End::Sealed);
    let sealed = h.state().series().unwrap().clone();
    // sealed: V(L)/V(0) = 1/cosh L > 0; R∞·coth L > R∞·tanh L (Rall 1959)
    let big_l = *sealed.x.last().unwrap();
    let tip = *sealed.v_from_soma.last().unwrap();
    assert!((tip - 1.0 / big_l.cosh()).abs() < 1e-9);
    assert!(sealed.rin_mohm[0] > killed.rin_mohm[0]);
    let ratio = sealed.rin_mohm[0] / killed.rin_mohm[0];
    assert!((ratio - 1.0 / big_l.tanh().powi(2)).abs() < 1e-6 * ratio);
}

#[test]
fn fast_signals_attenuate_more_than_steady_ones() {
    let mut h = harness();
    choose(&mut h, Preset::SlowFast);
    assert!(h.state().spec.freq_hz > 0.0);
    let ac = h.state().series().unwrap().clone();
    let dc = h.state().series_dc().unwrap().clone();
    let last = ac.v_from_soma.len() - 1;
    // the membrane capacitance filters (Koch 1999 ch. 2): lower |V| far away, lower |Z_in|
    assert!(ac.v_from_soma[last] < dc.v_from_soma[last]);
    assert!(ac.v_from_tip[0] < dc.v_from_tip[0]);
    assert!(ac.rin_mohm[0] < dc.rin_mohm[0]);
    set_slider(&mut h, "Frequency (Hz)", 500.0);
    let faster = h.state().series().unwrap().clone();
    assert!(faster.v_from_soma[last] < ac.v_from_soma[last]);
    set_slider(&mut h, "Frequency (Hz)", 0.0);
    assert!(h.state().series_dc().is_none());
    let now = h.state().series().unwrap();
    assert!((now.v_from_soma[last] - dc.v_from_soma[last]).abs() < 1e-12);
}

#[test]
fn thin_twig_has_a_high_input_resistance_that_falls_when_thickened() {
    let mut h = harness();
    choose(&mut h, Preset::ThinTwig);
    let s = h.state().series().unwrap().clone();
    let last = s.rin_mohm.len() - 1;
    assert!(s.rin_mohm[last] > 3.0 * s.rin_mohm[0]);
    // reciprocity: A(tip→soma)/A(soma→tip) = R_in(tip)/R_in(soma) (Rall & Rinzel 1973)
    let r = h.state().result().unwrap();
    let ratio = r.att_tip_to_soma / r.att_soma_to_tip;
    assert!((ratio - s.rin_mohm[last] / s.rin_mohm[0]).abs() < 1e-9 * ratio);
    set_slider(&mut h, "Side branches diameter (µm)", 1.5);
    let t = h.state().series().unwrap();
    assert!(t.rin_mohm[t.rin_mohm.len() - 1] < s.rin_mohm[last]);
}

#[test]
fn choosing_another_branch_moves_the_path() {
    let mut h = harness();
    choose(&mut h, Preset::RallTree);
    let before = h.state().series().unwrap().tip_section;
    h.get_by_label("Branch").click();
    h.run();
    h.get_by_label("1.2.2 (tip branch)").click();
    h.run();
    let lab = h.state();
    let s = lab.series().unwrap();
    assert_ne!(s.tip_section, before);
    assert_eq!(
        lab.result().unwrap().tree.sections[s.tip_section].name,
        "1.2.2"
    );
}

#[test]
fn a_branch_of_its_own_breaks_the_symmetry() {
    let mut h = harness();
    choose(&mut h, Preset::RallTree);
    h.get_by_label("Give this branch its own size").click();
    h.run();
    set_slider(&mut h, "This branch diameter (µm)", 0.3);
    let lab = h.state();
    assert_eq!(lab.spec.overrides.get(&lab.chosen).unwrap().diam_um, 0.3);
    assert!(!lab.result().unwrap().equivalent.qualifies());
}

#[test]
fn send_to_main_view_hands_over_the_tree_once() {
    let mut h = harness();
    choose(&mut h, Preset::RallTree);
    h.get_by_label("Send to main view").click();
    h.run();
    let (name, m) = h.state_mut().take_send_to_main().unwrap();
    assert!(name.contains("3/2 rule"));
    assert_eq!(m.metrics().tips, 4);
    assert!(h.state_mut().take_send_to_main().is_none());
}

#[test]
fn export_as_swc_writes_a_file_that_reads_back() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("lab.swc");
    let mut h = harness();
    choose(&mut h, Preset::ThinTwig);
    h.state_mut().dialogs = pollard::app::files::Dialogs::scripted(vec![Some(path.clone())]);
    h.get_by_label("Export as SWC").click();
    h.run();
    let m = pollard::Morphology::read(&path).unwrap();
    let want = h.state().result().unwrap().tree.sections.len();
    // an asymmetric tree of 4 levels: 4 main-line sections and 3 side twigs, 4 tips
    assert_eq!(want, 7);
    assert_eq!(m.metrics().tips, 4);
}

#[test]
fn the_app_opens_a_sent_lab_tree_in_the_cell_view() {
    use pollard::app::files::{Dialogs, RecentFiles};
    use pollard::app::{PollardApp, Screen, Start};
    let mut app = PollardApp::new(
        Start::Lab,
        Dialogs::scripted(vec![]),
        RecentFiles::in_memory(),
    );
    app.wait_idle();
    assert_eq!(app.screen, Screen::Lab);
    let mut h = Harness::builder()
        .with_size(egui::Vec2::new(1560.0, 960.0))
        .with_max_steps(200)
        .build_ui_state(|ui, app: &mut PollardApp| app.show(ui), app);
    h.run_steps(2);
    h.get_by_label(Preset::ThinTwig.label()).click();
    h.run_steps(2);
    h.get_by_label("Send to main view").click();
    h.run_steps(2);
    h.state_mut().wait_idle();
    h.run_steps(2);
    let app = h.state();
    assert_eq!(app.screen, Screen::Cell);
    let cell = &app.state.as_ref().unwrap().cell;
    assert!(cell.name.contains("thin twig"), "{}", cell.name);
    // the asymmetric tree of the lesson: 4 tips, 7 sections of 150–200 µm
    assert_eq!(cell.morph.metrics().tips, 4);
    let total = cell.morph.metrics().total_length_um;
    assert!(
        (total - (4.0 * 150.0 + 3.0 * 200.0)).abs() < 1e-6,
        "{total}"
    );
}

#[test]
fn clicking_a_branch_in_the_drawing_chooses_it() {
    let mut h = harness();
    choose(&mut h, Preset::ThinDaughters);
    h.run_steps(2);
    let secs = &h.state().result().unwrap().tree.sections;
    let other = secs.iter().position(|s| s.name == "1.2").unwrap();
    let before = h.state().series().unwrap().tip_section;
    assert_ne!(before, other);
    let p = h.state().branch_screen_pos(other).unwrap();
    h.event(egui::Event::PointerMoved(p));
    h.run_steps(1);
    for pressed in [true, false] {
        h.event(egui::Event::PointerButton {
            pos: p,
            button: egui::PointerButton::Primary,
            pressed,
            modifiers: egui::Modifiers::default(),
        });
        h.run_steps(1);
    }
    h.run();
    assert_eq!(h.state().chosen, other);
    assert_eq!(h.state().series().unwrap().tip_section, other);
}

#[test]
fn killing_one_tip_lowers_the_soma_input_resistance() {
    // a killed end draws more current than a sealed one (Y0·coth L > Y0·tanh L; Rall 1959)
    let mut h = harness();
    choose(&mut h, Preset::ThinDaughters);
    let sealed = h.state().series().unwrap().rin_mohm[0];
    h.get_by_label("This tip's end").click();
    h.run();
    h.get_by_label("killed").click();
    h.run();
    let lab = h.state();
    assert_eq!(lab.spec.end_overrides.get(&lab.chosen), Some(&End::Killed));
    let s = lab.series().unwrap();
    assert!(s.rin_mohm[0] < sealed);
    assert_eq!(*s.v_from_soma.last().unwrap(), 0.0);
}

#[test]
fn the_plots_can_run_against_electrotonic_distance() {
    let mut h = harness();
    choose(&mut h, Preset::SealedKilled);
    h.get_by_label("electrotonic distance X (in λ, at DC)")
        .click();
    h.run();
    assert_eq!(h.state().x_axis, pollard::app::lab::XAxis::Electrotonic);
    // X at the tip is ℓ/λ for the lesson's 600 µm × 1 µm cable (Johnston & Wu 1995 ch. 4, from memory)
    let x = *h.state().series().unwrap().x.last().unwrap();
    let lambda = (20_000.0f64 * 1e-4 / (4.0 * 150.0)).sqrt() * 1e4;
    assert!((x - 600.0 / lambda).abs() < 1e-9);
}
