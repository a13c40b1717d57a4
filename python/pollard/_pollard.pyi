"""Type stubs of the native module (see pollard/__init__.py for the overview)."""

import os
from typing import Any, Dict, List, Optional, Sequence, Tuple, Union

import numpy as np
import numpy.typing as npt

PathLike = Union[str, "os.PathLike[str]"]

__version__: str

class PollardError(ValueError):
    """A cell, option or file pollard cannot use; the message names the file, the line and
    the fault."""

class Morphology:
    """A reconstructed cell: points in parents-first order (the soma first)."""

    @property
    def source(self) -> str: ...
    @property
    def ids(self) -> npt.NDArray[np.int64]:
        """SWC id of every point."""
    @property
    def types(self) -> npt.NDArray[np.int32]:
        """SWC type code of every point."""
    @property
    def xyz(self) -> npt.NDArray[np.float64]:
        """Positions (µm, shape (n, 3)), times `scale` when given."""
    @property
    def radii(self) -> npt.NDArray[np.float64]:
        """Radii (µm), times `scale`; NA radii are default_diameter/2, or NaN without one."""
    @property
    def parent(self) -> npt.NDArray[np.int64]:
        """Index of each point's parent, -1 for a root."""
    @property
    def lines(self) -> npt.NDArray[np.int64]:
        """Line of the file of each point."""
    @property
    def metrics(self) -> Dict[str, Any]:
        """Points, trees, stems, branch points, tips, lengths, areas, orders, per-type table."""
    @property
    def warnings(self) -> List[Dict[str, Any]]:
        """Reader warnings: {'code': str, 'line': int | None, 'message': str}."""
    def __len__(self) -> int: ...

class ReducedTree:
    """A strict binary compartment tree (ids parents-first, the soma is 0)."""

    @property
    def parent(self) -> npt.NDArray[np.int64]:
        """Parent compartment, -1 at the soma."""
    @property
    def children(self) -> npt.NDArray[np.int64]:
        """Shape (n, 2): the two children, -1 -1 for a leaf."""
    @property
    def g_axial_ns(self) -> npt.NDArray[np.float64]:
        """Axial conductance to the parent (nS); 0 at the soma."""
    @property
    def g_leak_ns(self) -> npt.NDArray[np.float64]:
        """Leak conductance (nS)."""
    @property
    def capacitance_pf(self) -> npt.NDArray[np.float64]:
        """Capacitance (pF)."""
    @property
    def position_um(self) -> npt.NDArray[np.float64]:
        """Shape (n, 3): position of the point each compartment is named after (µm)."""
    @property
    def membrane_area_um2(self) -> npt.NDArray[np.float64]: ...
    @property
    def depth(self) -> npt.NDArray[np.int64]: ...
    @property
    def swc_type(self) -> npt.NDArray[np.int32]: ...
    @property
    def role(self) -> List[str]:
        """soma, branch_point, tip, junction, soma_second_child or section_point per compartment."""
    @property
    def point_ids(self) -> npt.NDArray[np.int64]:
        """SWC id of every point of the cell, in the order of point_compartment."""
    @property
    def point_compartment(self) -> npt.NDArray[np.int64]:
        """Compartment of every point, -1 for points left out."""
    @property
    def site_compartment(self) -> npt.NDArray[np.int64]:
        """Compartment of every synapse site (order of report's sites); the larger part when split."""
    @property
    def site_split_compartment(self) -> npt.NDArray[np.int64]:
        """Per site: the compartment taking the smaller part of a split input, -1 if not split."""
    @property
    def site_split_weight(self) -> npt.NDArray[np.float64]:
        """Per site: that smaller part w (0 < w <= 0.5; 0 if not split)."""
    @property
    def feed_forward(self) -> Dict[str, Any]:
        """{'w': float64 array (NaN at the soma), 'subtree_conductance_ns': float64 array,
        'root_input_conductance_ns': float, 'layers': list of int64 arrays}."""
    @property
    def report(self) -> Dict[str, Any]:
        """What was lost (the report of `pollard reduce --json`)."""
    def to_json(self, path: PathLike) -> None:
        """Writes exactly what `pollard reduce --out` writes."""
    def to_neuroml(
        self, path: PathLike, cell_id: Optional[str] = None, rest_mv: float = -65.0
    ) -> None:
        """Writes a NeuroML v2 cell, as `pollard reduce --neuroml` does."""
    def fidelity(
        self,
        epsp_tau_ms: float = 0.5,
        peak_pa: float = 10.0,
        dt_ms: Optional[float] = None,
        duration_ms: Optional[float] = None,
        max_duration_ms: float = 500.0,
    ) -> Dict[str, Any]:
        """Soma EPSP (peak, time to peak) and DC attenuation errors over the sites, full cell
        against this tree (trees made by `reduce` only; the full cell runs once per options)."""
    def fidelity_sites(
        self,
        epsp_tau_ms: float = 0.5,
        peak_pa: float = 10.0,
        dt_ms: Optional[float] = None,
        duration_ms: Optional[float] = None,
        max_duration_ms: float = 500.0,
    ) -> Dict[str, npt.NDArray[Any]]:
        """The per-site table behind `fidelity`: one numpy array per column."""
    def budget_sweep(self, budgets: Optional[List[int]] = None) -> List[Dict[str, Any]]:
        """The fidelity summary at several budgets of this tree's reduction (`pollard budgets`):
        one dict per distinct tree, ascending (compartments, requested, slowest_time_constant_ms,
        polish, report); default budgets 1, 3, 7, 15, ... and the cell's maximum."""
    def synapse_matrix(self) -> Dict[str, Any]:
        """The input × compartment matrix of the synapse table the tree was reduced for:
        'row', 'column', 'count' (int64 arrays), 'weight' (float64), 'shape' (inputs,
        compartments) and 'inputs' (names by row); for
        scipy.sparse.coo_matrix((count, (row, column)), shape=shape)."""
    @staticmethod
    def from_json(path: PathLike) -> "ReducedTree":
        """Reads a tree written by `pollard reduce --out` or `to_json`."""
    def __len__(self) -> int: ...

def read_swc(
    path: PathLike, scale: Optional[float] = None, default_diameter: Optional[float] = None
) -> Morphology:
    """Reads an SWC file (µm; `scale` converts other units, `default_diameter` fills NA radii)."""

def cable_maps(
    cell: Union[PathLike, Morphology],
    rm: float = 20000.0,
    ra: float = 150.0,
    cm: float = 1.0,
    freq: float = 0.0,
    injection_point: Optional[int] = None,
    scale: Optional[float] = None,
    default_diameter: Optional[float] = None,
) -> Dict[str, Any]:
    """Per point (order of Morphology.ids; NaN off the main tree): 'input_impedance_mohm',
    'attenuation_to_soma', 'attenuation_from_soma', with `injection_point` (an SWC id: a current
    injected there) 'v_over_v_injection_point';
    plus 'ids', 'freq_hz' and the whole-cell 'summary'."""

def reduce(
    cell: Union[PathLike, Morphology],
    compartments: int,
    sites: Union[None, PathLike, Sequence[int], Sequence[Tuple[float, float, float]]] = None,
    types: Optional[Sequence[int]] = None,
    rm: float = 20000.0,
    ra: float = 150.0,
    cm: float = 1.0,
    impedance_freq: float = 100.0,
    junction_fraction: float = 1e-4,
    capacitance: str = "timed",
    scale: Optional[float] = None,
    default_diameter: Optional[float] = None,
    synapses: Optional[PathLike] = None,
    snap_limit: float = 3.0,
    skip_far: bool = False,
    split_inputs: bool = True,
) -> ReducedTree:
    """Reduces a cell to a strict binary tree of `compartments` compartments (odd; an even
    number is rounded down), as `pollard reduce` does. `sites`: a site-list file, SWC ids, or
    (x, y, z) positions in µm; `types`: SWC types to keep (the soma always is);
    `capacitance`: "timed" (the default: fitted, then polished on the sites' EPSP peaks and
    times to peak, and each site possibly placed on the link between two compartments —
    see `site_split_compartment`; `split_inputs=False` gives each site one compartment — as
    `pollard reduce`; runs the full cell once, which `fidelity` and `to_json`
    then reuse; slowest time constant within about 10 % of Rm·Cm), "fitted" (to the cell's
    transfer impedances only; within 2 %) or "uniform" (C = Rm·Cm·G, exactly Rm·Cm);
    `synapses`: a synapse table (CSV: input, swc_id or x,y,z in the cell's units, weight),
    snapped as `pollard reduce --synapses` does (`snap_limit` µm, `skip_far`); its synapses
    are the sites and `ReducedTree.synapse_matrix()` gives the input × compartment matrix."""

def synth_cell(path: PathLike, points: int, seed: int = 1) -> None:
    """Writes an invented cell of about `points` points (deterministic for a seed)."""
