"""pollard from Python: passive cable maps and strict binary compartment reduction of
reconstructed neurons (SWC), computed by the same Rust library as the `pollard` command.

    import pollard
    cell = pollard.read_swc("cell.swc")
    tree = pollard.reduce(cell, compartments=63)
    tree.g_axial_ns, tree.g_leak_ns, tree.capacitance_pf, tree.parent   # numpy arrays
    tree.to_json("tree.json")           # exactly what `pollard reduce --out` writes

Units: µm; Rm Ω·cm², Ra Ω·cm, Cm µF/cm²; conductances nS, capacitances pF, impedances MΩ.
Every failure raises `pollard.PollardError` (a ValueError) naming the file, the line and the
fault. Long calls release the GIL.
"""

from ._pollard import (
    Morphology,
    PollardError,
    ReducedTree,
    __version__,
    cable_maps,
    read_swc,
    reduce,
    synth_cell,
)

__all__ = [
    "Morphology",
    "PollardError",
    "ReducedTree",
    "__version__",
    "cable_maps",
    "read_swc",
    "reduce",
    "synth_cell",
]
