//! The lessons of the branching lab (their text, formula and tree) and the lab's choices of
//! colour and x axis. Lesson prose lives here and nowhere else.

use crate::lab::{End, Piece, Shape, TreeSpec};

/// One lesson: a tree and a few sentences.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Preset {
    ThinDaughters,
    ThickDaughters,
    RallTree,
    SealedKilled,
    SlowFast,
    ThinTwig,
}

impl Preset {
    pub const ALL: [Preset; 6] = [
        Preset::ThinDaughters,
        Preset::ThickDaughters,
        Preset::RallTree,
        Preset::SealedKilled,
        Preset::SlowFast,
        Preset::ThinTwig,
    ];

    pub fn label(self) -> &'static str {
        match self {
            Preset::ThinDaughters => "Thin daughters on a thick trunk",
            Preset::ThickDaughters => "Thick daughters on a thin trunk",
            Preset::RallTree => "3/2 rule and the equivalent cylinder",
            Preset::SealedKilled => "Sealed end versus killed end",
            Preset::SlowFast => "Steady versus fast signals",
            Preset::ThinTwig => "Why a thin twig has a high input resistance",
        }
    }

    /// Two or three sentences in plain words.
    pub fn text(self) -> &'static str {
        match self {
            Preset::ThinDaughters => {
                "Going out from the soma, the voltage reaches a fork whose two thin daughters draw \
                 little current, so it passes the fork almost unchanged. Coming in from a daughter's \
                 tip, the same fork offers the thick trunk as a huge load: the voltage collapses at \
                 the fork. Compare the two curves at the fork line, and see how far below 1 the 3/2 \
                 ratio is."
            }
            Preset::ThickDaughters => {
                "The reverse mismatch: a thin trunk ends on two thick daughters, and seen from the trunk \
                 the fork is a heavy load, almost a short to rest, so the voltage from the soma \
                 sinks along the trunk as if towards a killed end. Here even the one-sidedness turns \
                 round: the thick tip has a lower input resistance than the start of the thin trunk, \
                 so the tip's signal reaches the soma better than the soma's reaches the tip. Drag \
                 the daughter diameter down and watch the 3/2 ratio come towards 1."
            }
            Preset::RallTree => {
                "When the daughters' d^3/2 add up to the parent's at every fork, the daughters \
                 together load the parent exactly as a longer parent would. If, besides, every tip \
                 sits at the same electrotonic distance L and ends the same way, the whole tree seen \
                 from the soma is one cylinder of the trunk's diameter and length L·λ. The three \
                 input resistances on the right agree; move one diameter and they part."
            }
            Preset::SealedKilled => {
                "A sealed end lets no current out: charge piles up and the profile flattens near \
                 the tip. A killed end (cut open, or clamped to rest) holds the tip at 0 and drains \
                 current, so the voltage falls all the way to zero and the input resistance drops. \
                 The dashed curves show the other end condition; switch it to swap them."
            }
            Preset::SlowFast => {
                "The membrane is a resistor and a capacitor side by side. For a fast signal the \
                 capacitor conducts too, so the membrane leaks more, the cable behaves as if longer, \
                 and attenuation grows. The dashed curves are the same tree under a steady current: \
                 dendrites pass slow signals better than fast ones."
            }
            Preset::ThinTwig => {
                "Current injected into a thin twig far out has little membrane near it to leak \
                 through and a thin core to flow away along, so it makes a large local voltage: the \
                 input resistance climbs towards the tip. The same twig's signal is strongly \
                 attenuated on its way to the soma, while the soma's signal reaches the twig almost \
                 whole; by reciprocity the two attenuations differ exactly by the ratio of input \
                 resistances."
            }
        }
    }

    /// The formula behind the lesson.
    pub fn formula(self) -> &'static str {
        match self {
            Preset::ThinDaughters | Preset::ThickDaughters => {
                "load at the fork  G_L = Σ Y0_c·tanh(L_c),  Y0 = 1/R∞ ∝ d^3/2\n\
                 V_fork / V_soma = 1 / (cosh L_t + (G_L / Y0_t)·sinh L_t)"
            }
            Preset::RallTree => {
                "d_p^3/2 = Σ d_c^3/2 at every fork,  L = Σ ℓ_i/λ_i on every path\n\
                 R_in = R∞(d_trunk)·coth L,  R∞ = (2/π)·√(Rm·Ra)·d^(−3/2)"
            }
            Preset::SealedKilled => {
                "sealed: R_in = R∞·coth L,  V(X)/V(0) = cosh(L−X)/cosh L\n\
                 killed: R_in = R∞·tanh L,  V(X)/V(0) = sinh(L−X)/sinh L"
            }
            Preset::SlowFast => {
                "y_m = 1/Rm + jωCm,  L(ω) = L·√(1 + jωτ),  τ = Rm·Cm\n\
                 |V(X)/V(0)| = |cosh(L(ω)·(1 − X/L)) / cosh L(ω)|"
            }
            Preset::ThinTwig => {
                "A(tip to soma) = Z_tt / Z_ts,  A(soma to tip) = Z_ss / Z_st,  Z_ts = Z_st\n\
                 so  A(tip to soma) / A(soma to tip) = R_in(tip) / R_in(soma)"
            }
        }
    }

    /// The tree and the chosen branch of the lesson.
    pub fn setup(self) -> (TreeSpec, usize) {
        let mut s = TreeSpec::default();
        let mut chosen = 0;
        match self {
            Preset::ThinDaughters => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(250.0, 4.0);
                s.level[1] = Piece::new(250.0, 0.7);
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::ThickDaughters => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(250.0, 0.8);
                s.level[1] = Piece::new(250.0, 3.0);
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::RallTree => {
                s.shape = Shape::Symmetric;
                s.levels = 3;
                let k = 2f64.powf(-2.0 / 3.0);
                s.level[0] = Piece::new(200.0, 3.0);
                s.level[1] = Piece::new(150.0, 3.0 * k);
                s.level[2] = Piece::new(120.0, 3.0 * k * k);
                s.soma_diam_um = 0.0;
                chosen = 3;
            }
            Preset::SealedKilled => {
                s.shape = Shape::Cable;
                s.level[0] = Piece::new(600.0, 1.0);
                s.end = End::Killed;
            }
            Preset::SlowFast => {
                s.shape = Shape::YJunction;
                s.level[0] = Piece::new(400.0, 2.0);
                s.level[1] = Piece::new(300.0, 1.26);
                s.freq_hz = 100.0;
                s.soma_diam_um = 10.0;
                chosen = 1;
            }
            Preset::ThinTwig => {
                s.shape = Shape::Asymmetric;
                s.levels = 4;
                s.level[0] = Piece::new(150.0, 4.0);
                s.level[1] = Piece::new(150.0, 3.0);
                s.level[2] = Piece::new(150.0, 2.2);
                s.level[3] = Piece::new(150.0, 1.6);
                s.side = Piece::new(200.0, 0.4);
                s.soma_diam_um = 15.0;
                chosen = 4;
            }
        }
        (s, chosen)
    }
}

/// What the drawing's colours show.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LabColour {
    /// |V/V_soma| for current at the soma.
    FromSoma,
    /// |V/V_tip| for current at the chosen tip.
    FromTip,
    /// Local input resistance.
    InputResistance,
}

impl LabColour {
    pub const ALL: [LabColour; 3] = [
        LabColour::FromSoma,
        LabColour::FromTip,
        LabColour::InputResistance,
    ];

    pub fn label(self) -> &'static str {
        match self {
            LabColour::FromSoma => "Voltage, current at the soma",
            LabColour::FromTip => "Voltage, current at the tip",
            LabColour::InputResistance => "Local input resistance",
        }
    }
}

/// The x axis of the plots.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum XAxis {
    Micrometres,
    Electrotonic,
}
