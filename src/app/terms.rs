//! Hover help for the terms of the trade a newcomer may not know, one text per term, shared by
//! the cell view and the lab so both screens explain a word the same way.

/// Strahler order (Strahler 1952), as the app computes it.
pub const STRAHLER: &str = "Strahler order: tips are order 1; where two branches of the same \
order meet, the parent is one order higher; otherwise it keeps the larger order. A branching \
rank counted from the tips.";

/// Sholl profile (Sholl 1953).
pub const SHOLL: &str = "Sholl profile: draw spheres of growing radius around the soma centre \
and count how many branches cross each one. A profile of where the arbor is dense.";

/// The dendrogram layout.
pub const DENDROGRAM: &str = "Dendrogram: the tree drawn as a diagram, not in space: the soma at \
the top, depth downward, each fork splitting into two; line width follows the axial \
conductance.";

/// Decibels and nepers.
pub const LOG_UNITS: &str = "Both measure a voltage ratio on a log scale. dB: 20·log10 of the \
ratio. Np (neper): its natural log, ln(ratio); 1 Np = 8.686 dB, 0.1 Np ≈ 10 %.";

/// Electrotonic distance.
pub const ELECTROTONIC: &str = "X (in λ): distance measured in length constants. λ = √(Rm·d / \
(4·Ra)) is how far a steady voltage spreads along an infinite cylinder of diameter d before \
falling to 1/e; X = Σ length/λ along the path.";

/// Input resistance of a semi-infinite cylinder.
pub const R_INFINITY: &str = "R∞: the input resistance of a cylinder of the same diameter that \
went on forever, (2/π)·√(Rm·Ra)·d^(−3/2). A finite branch is R∞·coth L (sealed end) or \
R∞·tanh L (killed end), L its length in λ.";

/// Junction links of the reduction.
pub const JUNCTION_FRACTION: &str = "A strict binary tree allows two children per compartment: a \
point with three or more children is split into a cascade of junction compartments joined by \
very short links, each the junction length fraction (default 1e-4) times the branch point's \
radius; `pollard reduce --junction-fraction` sets it.";
