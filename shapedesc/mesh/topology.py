"""Digital topology of voxel sets: simple points and topology correction to a ball.

Connectivity pairs
------------------
A voxel set X is read with an *object* adjacency and the dual *background* adjacency:
(26, 6) — object voxels touching at a corner are connected, background voxels only
through faces — or (6, 26).  The pairs are dual: adding a voxel x to X is
topology-preserving under (6, 26) exactly when removing x from the complement is
topology-preserving under (26, 6), so one lookup table serves both.

Simple points
-------------
A voxel x is *simple* for X when adding it to X (or removing it) changes no component,
cavity or tunnel of either X or its complement.  Bertrand & Malandain (1994) show it is
a local property of the 26-neighbourhood N26*(x): under (26, 6), x is simple iff

* X ∩ N26*(x) has exactly one 26-connected component, and
* the background voxels of N18*(x) have exactly one 6-connected component that is
  6-adjacent to x.

Every one of the 2**26 neighbourhood configurations is classified once, with
bit-parallel flood fills, into a packed bit table (8 MiB) cached in the user cache
folder (see :func:`simple_point_table`).

Topology correction
-------------------
:func:`correct_topology` turns a voxel set into a topological ball (one component, no
cavity, no tunnel) with few changed voxels, following the region-growing approach of
topology-preserving correction (Han, Xu & Prince 2002; Kriegeskorte & Goebel 2001;
Bazin & Pham 2007):

1. grow the object from its most confident voxel, adding only simple points of the
   object in order of decreasing evidence — the result F ⊆ X is a ball; the object
   voxels left out are *cuts* through handles, placed where the evidence is weakest;
2. grow the background from the outer shell of the box, adding only simple points of
   the background (dual connectivity) in order of increasing evidence — its complement
   G ⊇ X is a ball; the background voxels left out are *fills* spanning the handles;
3. group cut and fill voxels into clusters (26-connected; one cluster per handle, or
   per group of interlinked handles) and choose, per cluster, the cheaper of cutting
   and filling (fewer changed voxels);
4. if the combination is not a ball (interlinked clusters can interfere), grow the
   object once more inside it from the seed; what cannot be added is cut, so the result
   is a ball by construction.

Growth is vectorised: candidate voxels are tested in the eight 2×2×2 parity classes
(voxels of one class are never 26-adjacent, so their tests are independent), in bands of
evidence, restricted to the moving front.

References
----------
G. Bertrand and G. Malandain, "A new characterization of three-dimensional simple
points", Pattern Recognition Letters 15(2):169-175, 1994,
doi:10.1016/0167-8655(94)90046-9.

X. Han, C. Xu and J. L. Prince, "A topology preserving level set method for geometric
deformable models" / "Topology correction in brain cortex segmentation using a
multiscale, graph-based algorithm", IEEE TPAMI 24(10):1307-1320 (2002) resp.
IEEE TMI 21(2):109-121 (2002); doi:10.1109/TPAMI.2002.1039212.

N. Kriegeskorte and R. Goebel, "An efficient algorithm for topologically correct
segmentation of the cortical sheet in anatomical MR volumes", NeuroImage 14(2):329-346,
2001, doi:10.1006/nimg.2001.0831.

P.-L. Bazin and D. L. Pham, "Topology correction of segmented medical images using a
fast marching algorithm", Computer Methods and Programs in Biomedicine 88(2):182-190,
2007, doi:10.1016/j.cmpb.2007.08.006.

T. Y. Kong and A. Rosenfeld, "Digital topology: introduction and survey", Computer
Vision, Graphics, and Image Processing 48(3):357-393, 1989,
doi:10.1016/0734-189X(89)90147-3.
"""

from __future__ import annotations

import hashlib
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import ndimage as ndi

from shapedesc import defaults

logger = logging.getLogger(__name__)

__all__ = [
    "NEIGHBOUR_OFFSETS",
    "TopologyFix",
    "correct_topology",
    "is_simple",
    "neighbourhood_codes",
    "simple_point_table",
    "topology_counts",
]

#: The 26 neighbour offsets (di, dj, dk) in bit order: bit b of a configuration code is
#: the neighbour at NEIGHBOUR_OFFSETS[b]; positions run over the 3x3x3 cube in C order
#: with the centre left out.
NEIGHBOUR_OFFSETS: np.ndarray = np.array(
    [(a, b, c) for a in (-1, 0, 1) for b in (-1, 0, 1) for c in (-1, 0, 1)
     if (a, b, c) != (0, 0, 0)], dtype=np.int64)

_N_CODES = 1 << 26
_ALL26 = np.uint32(_N_CODES - 1)
_TABLE: np.ndarray | None = None


# --------------------------------------------------------------------------- the table
def _cube_masks() -> dict[str, int]:
    """27-bit masks over the 3x3x3 cube (bit = 9*i + 3*j + k, centre = bit 13)."""
    def mask(pred):
        return sum(1 << (9 * i + 3 * j + k) for i in range(3) for j in range(3)
                   for k in range(3) if pred(i, j, k))
    return {
        "k0": mask(lambda i, j, k: k == 0), "k2": mask(lambda i, j, k: k == 2),
        "j0": mask(lambda i, j, k: j == 0), "j2": mask(lambda i, j, k: j == 2),
        "full": (1 << 27) - 1,
        # left shifts must also drop bits pushed past bit 26
        "not_k0": ((1 << 27) - 1) & ~mask(lambda i, j, k: k == 0),
        "not_j0": ((1 << 27) - 1) & ~mask(lambda i, j, k: j == 0),
        # 18-neighbourhood without the centre: everything but the 8 corners and bit 13
        "n18": mask(lambda i, j, k: 0 < sum(abs(t - 1) for t in (i, j, k)) <= 2),
        "n6": mask(lambda i, j, k: sum(abs(t - 1) for t in (i, j, k)) == 1),
    }


def _shifts(m: np.ndarray, c: dict[str, np.uint32]):
    """The six unit shifts of 27-bit cube masks (bits shifted out of the cube are lost)."""
    return (
        (m << np.uint32(1)) & c["not_k0"], (m >> np.uint32(1)) & ~c["k2"],
        (m << np.uint32(3)) & c["not_j0"], (m >> np.uint32(3)) & ~c["j2"],
        (m << np.uint32(9)) & c["full"], m >> np.uint32(9),
    )


def _dilate6(m, c):
    out = m.copy()
    for s in _shifts(m, c):
        out |= s
    return out


def _dilate26(m, c):
    # the 3x3x3 box is the product of three 1-D dilations
    a = m | ((m << np.uint32(1)) & c["not_k0"]) | ((m >> np.uint32(1)) & ~c["k2"])
    a = a | ((a << np.uint32(3)) & c["not_j0"]) | ((a >> np.uint32(3)) & ~c["j2"])
    return a | ((a << np.uint32(9)) & c["full"]) | (a >> np.uint32(9))


def _flood(seed: np.ndarray, region: np.ndarray, dilate, c) -> np.ndarray:
    """Component(s) of ``region`` reachable from ``seed`` (bit-parallel, per element)."""
    s = seed.copy()
    active = np.arange(len(s))
    cur = s
    reg = region
    while len(active):
        nxt = dilate(cur, c) & reg
        moved = nxt != cur
        s[active] = nxt
        active = active[moved]
        cur = nxt[moved]
        reg = reg[moved]
    return s


def _simple_27(m: np.ndarray) -> np.ndarray:
    """(26, 6)-simplicity of x for 27-bit neighbourhood masks ``m`` (centre bit clear)."""
    c = {k: np.uint32(v) for k, v in _cube_masks().items()}
    lowest = m & (~m + np.uint32(1))
    obj = _flood(lowest, m, _dilate26, c)
    ok = (m != 0) & (obj == m)
    bg = ~m & c["n18"]
    bg6 = bg & c["n6"]
    seed = bg6 & (~bg6 + np.uint32(1))
    reach = _flood(seed, bg, _dilate6, c)
    return ok & (bg6 != 0) & ((reach & bg6) == bg6)


def _codes_to_27(codes: np.ndarray) -> np.ndarray:
    codes = codes.astype(np.uint32)
    return (codes & np.uint32(0x1FFF)) | ((codes >> np.uint32(13)) << np.uint32(14))


def _build_table() -> np.ndarray:
    out = np.empty(_N_CODES // 8, np.uint8)
    chunk = 1 << 21
    for start in range(0, _N_CODES, chunk):
        codes = np.arange(start, start + chunk, dtype=np.uint32)
        ok = _simple_27(_codes_to_27(codes))
        out[start // 8:(start + chunk) // 8] = np.packbits(ok, bitorder="little")
    return out


_TABLE_FILE = Path(__file__).resolve().parent.parent / "data" / "simple26_6.npz"

#: sha256 of the table bytes (the table is deterministic; checked on every load).
_TABLE_SHA256 = "3699e69a8cb5558afbae8c5420e3269555ec2b6fd4568e53509a57762a8baa6b"


def _valid(t) -> bool:
    return (t.shape == (_N_CODES // 8,) and t.dtype == np.uint8
            and hashlib.sha256(t.tobytes()).hexdigest() == _TABLE_SHA256)


def simple_point_table() -> np.ndarray:
    """The (26, 6) simple-point table: one bit per neighbourhood configuration.

    Shipped as ``shapedesc/data/simple26_6.npz`` (120 kB compressed, 8 MiB in memory)
    and checked against its sha256 on load; when the file is missing or does not match,
    the table is rebuilt from the definition (about 15-40 s, once per process).

    Returns
    -------
    ndarray, shape (2**23,), uint8
        Bit ``code & 7`` of byte ``code >> 3`` is 1 when a voxel whose 26 neighbours have
        object membership ``code`` (bit b = neighbour ``NEIGHBOUR_OFFSETS[b]``) is simple
        under (26, 6).  Read-only.
    """
    global _TABLE
    if _TABLE is not None:
        return _TABLE
    table = None
    try:
        with np.load(_TABLE_FILE, allow_pickle=False) as z:
            t = z["table"]
        if _valid(t):
            table = t
        else:
            logger.warning("simple-point table %s does not match its checksum; rebuilding it",
                           _TABLE_FILE)
    except (OSError, KeyError, ValueError) as exc:
        logger.warning("cannot read simple-point table %s (%s); rebuilding it", _TABLE_FILE, exc)
    if table is None:
        table = _build_table()
    table.setflags(write=False)
    _TABLE = table
    return table


# --------------------------------------------------------------------------- queries
def neighbourhood_codes(neighbourhoods: np.ndarray) -> np.ndarray:
    """Configuration codes of 3x3x3 neighbourhoods.

    Parameters
    ----------
    neighbourhoods : ndarray, shape (..., 3, 3, 3), bool
        Object membership around each voxel; the centre is ignored.

    Returns
    -------
    ndarray, shape (...,), uint32
        Bit b set when the neighbour at ``NEIGHBOUR_OFFSETS[b]`` is object.
    """
    nb = np.asarray(neighbourhoods, dtype=bool)
    if nb.shape[-3:] != (3, 3, 3):
        raise ValueError(f"neighbourhoods must end in shape (3, 3, 3), got {nb.shape}")
    flat = nb.reshape(nb.shape[:-3] + (27,))
    flat = np.delete(flat, 13, axis=-1)
    weights = (np.uint32(1) << np.arange(26, dtype=np.uint32))
    return (flat.astype(np.uint32) * weights).sum(axis=-1, dtype=np.uint32)


def _lookup(table: np.ndarray, codes: np.ndarray) -> np.ndarray:
    return ((table[codes >> np.uint32(3)] >> (codes & np.uint32(7)).astype(np.uint8)) & 1) \
        .astype(bool)


def is_simple(neighbourhoods: np.ndarray, *, connectivity: int = 26) -> np.ndarray:
    """Whether the centre voxel of each 3x3x3 neighbourhood is simple.

    Parameters
    ----------
    neighbourhoods : ndarray, shape (..., 3, 3, 3), bool
        Object membership; the centre is ignored (simplicity does not depend on it).
    connectivity : {26, 6}
        Object adjacency; the background uses the dual one (6 resp. 26).

    Returns
    -------
    ndarray, shape (...,), bool
    """
    if connectivity not in (6, 26):
        raise ValueError(f"connectivity must be 26 or 6 (object adjacency), got {connectivity!r}")
    codes = neighbourhood_codes(neighbourhoods)
    if connectivity == 6:
        codes = codes ^ _ALL26
    return _lookup(simple_point_table(), codes)


def topology_counts(mask: np.ndarray, *, connectivity: int = 26) -> tuple[int, int, int]:
    """Components, cavities and tunnels of a voxel set.

    Parameters
    ----------
    mask : ndarray, shape (I, J, K), bool
    connectivity : {26, 6}
        Object adjacency (background: the dual one).

    Returns
    -------
    (components, cavities, tunnels) : tuple of int
        Betti numbers b0, b2, b1 of the object under the pair: cavities are background
        components not reaching the (padded) border, tunnels from the Euler number
        χ = b0 − b1 + b2 (skimage.measure.euler_number).
    """
    from skimage.measure import euler_number

    m = np.pad(np.asarray(mask, dtype=bool), 1)
    so, sb = _structures(connectivity)
    _, n = ndi.label(m, structure=so)
    _, nb = ndi.label(~m, structure=sb)
    chi = int(euler_number(m, connectivity=3 if connectivity == 26 else 1))
    return int(n), int(nb - 1), int(n + (nb - 1) - chi)


def _structures(connectivity: int) -> tuple[np.ndarray, np.ndarray]:
    s26 = np.ones((3, 3, 3), bool)
    s6 = ndi.generate_binary_structure(3, 1)
    return (s26, s6) if connectivity == 26 else (s6, s26)


# --------------------------------------------------------------------------- correction
@dataclass(frozen=True)
class TopologyFix:
    """Outcome of :func:`correct_topology`.

    Attributes
    ----------
    mask : ndarray, shape (I, J, K), bool
        The corrected voxel set: one component, no cavity, no tunnel under the pair.
    voxels_added, voxels_removed : int
        Voxels changed with respect to the input (added = filled, removed = cut).
    clusters_filled, clusters_cut : int
        Handle clusters resolved by filling resp. cutting (a cluster is a 26-connected
        group of cut and fill candidates; usually one handle).
    regrown : bool
        True when the per-cluster choice did not give a ball and the object had to be
        grown once more inside it (step 4 of the module description).
    connectivity : int
        Object adjacency (26 or 6; background: the dual one).
    """

    mask: np.ndarray
    voxels_added: int
    voxels_removed: int
    clusters_filled: int
    clusters_cut: int
    regrown: bool
    connectivity: int


def signed_distance_evidence(mask: np.ndarray, *, sampling=None) -> np.ndarray:
    """Default evidence: signed Euclidean distance to the set's boundary (voxels or mm).

    Positive inside (distance to the nearest background voxel centre minus half a
    voxel), negative outside (minus the distance to the nearest object voxel centre plus
    half a voxel), so the boundary sits at 0 between the two layers.

    Parameters
    ----------
    mask : ndarray, shape (I, J, K), bool
    sampling : sequence of 3 float, optional
        Voxel edge lengths (mm) for anisotropic voxels; default 1 (voxel units).

    Returns
    -------
    ndarray, shape (I, J, K), float64
    """
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return np.full(m.shape, -np.inf)
    half = 0.5 * (min(sampling) if sampling is not None else 1.0)
    inside = ndi.distance_transform_edt(m, sampling=sampling) if (~m).any() \
        else np.full(m.shape, np.inf)
    outside = ndi.distance_transform_edt(~m, sampling=sampling)
    return np.where(m, inside - half, -(outside - half))


def correct_topology(mask: np.ndarray, *, evidence: np.ndarray | None = None,
                     connectivity: int = defaults.OBJECT_CONNECTIVITY,
                     n_bands: int = defaults.TOPOLOGY_EVIDENCE_BANDS) -> TopologyFix:
    """Make a voxel set a topological ball with few changed voxels.

    Parameters
    ----------
    mask : ndarray, shape (I, J, K), bool
        The voxel set; usually one component with cavities filled.  Otherwise the
        correction also removes other components or joins them by bridges, and fills
        or opens cavities, whichever changes fewer voxels.
    evidence : ndarray, shape (I, J, K), float, optional
        How object-like each voxel is (higher = more; e.g. a probability map).  Object
        voxels are grown in decreasing, background voxels in increasing evidence, so
        handles are cut and filled where the evidence is weakest.  Default: the signed
        distance to the set's boundary (:func:`signed_distance_evidence`).
    connectivity : {26, 6}
        Object adjacency; the background uses the dual one.
    n_bands : int
        Number of evidence bands (quantiles) the growth proceeds in; inside a band the
        order is the parity-class sweep.  More bands follow the evidence more closely
        and cost more passes.

    Returns
    -------
    TopologyFix

    Notes
    -----
    The method is described in the module docstring.  It is exact in its guarantee
    (the result is a ball under the pair) and heuristic in its optimality (the change
    is small, not provably minimal).
    """
    m = np.asarray(mask)
    if m.ndim != 3:
        raise ValueError(f"mask must be 3-D, got shape {m.shape}")
    m = m.astype(bool)
    if not m.any():
        raise ValueError("mask is empty: there is no object to correct")
    if connectivity not in (6, 26):
        raise ValueError(f"connectivity must be 26 or 6 (object adjacency), got {connectivity!r}")
    if n_bands < 1:
        raise ValueError(f"n_bands must be >= 1, got {n_bands}")
    if evidence is not None:
        evidence = np.asarray(evidence, dtype=np.float64)
        if evidence.shape != m.shape:
            raise ValueError(f"evidence has shape {evidence.shape}, the mask {m.shape}; "
                             "give one value per voxel")
        if not np.all(np.isfinite(evidence[m])):
            raise ValueError("evidence has non-finite values inside the object")
    # crop to the bounding box with a margin of 2 (shell + one free layer)
    idx = np.nonzero(m)
    lo = [int(i.min()) for i in idx]
    hi = [int(i.max()) + 1 for i in idx]
    crop = tuple(slice(a, b) for a, b in zip(lo, hi))
    mc = np.pad(m[crop], 2)
    if evidence is None:
        evc = signed_distance_evidence(mc)
    else:
        big = np.finfo(np.float64).max
        evc = np.pad(np.nan_to_num(evidence[crop], nan=-big, posinf=big, neginf=-big), 2,
                     constant_values=-big)
    out, info = _correct(mc, evc, connectivity, n_bands)
    result = np.zeros_like(m)
    result[crop] = out[2:-2, 2:-2, 2:-2]
    added = int(np.count_nonzero(result & ~m))
    removed = int(np.count_nonzero(m & ~result))
    return TopologyFix(mask=result, voxels_added=added, voxels_removed=removed,
                       connectivity=connectivity, **info)


def _flat_offsets(shape) -> np.ndarray:
    strides = np.array([shape[1] * shape[2], shape[2], 1], dtype=np.int64)
    return NEIGHBOUR_OFFSETS @ strides


def _parity(shape) -> np.ndarray:
    a = (np.arange(shape[0]) % 2).astype(np.uint8)[:, None, None] * 4
    b = (np.arange(shape[1]) % 2).astype(np.uint8)[None, :, None] * 2
    c = (np.arange(shape[2]) % 2).astype(np.uint8)[None, None, :]
    return (a + b + c).ravel()


def _codes_at(state: np.ndarray, cand: np.ndarray, offs: np.ndarray) -> np.ndarray:
    """Configuration codes of ``state`` (flat uint8 0/1) around flat indices ``cand``."""
    g = state[cand[:, None] + offs[None, :]]  # (k, 26); packbits pads to 4 bytes
    return np.packbits(g, axis=1, bitorder="little").view("<u4").ravel().astype(np.uint32)


def _grow(state, allowed, prio, *, shape, parity, offs, table, complement, n_bands):
    """Add simple points of ``allowed`` to ``state`` (flat uint8, modified in place).

    Candidates are taken in bands of increasing ``prio``; within a band, repeated
    sweeps over the eight parity classes add every candidate that is simple at the time
    of its class's turn, until a sweep adds nothing.  ``complement`` selects the
    background role (the growing set uses the dual adjacency of the table's pair).
    Voxels of ``allowed`` never index the array border.

    The front is kept as two lists: *active* candidates (priority within the current
    band; retested each sweep) and *waiting* ones (scanned once per band).
    """
    todo = np.flatnonzero(allowed & (state == 0))
    if len(todo) == 0:
        return
    levels = np.unique(np.quantile(prio[todo], np.linspace(0.0, 1.0, n_bands + 1)[1:]))
    levels[-1] = np.inf
    del todo
    dil = ndi.binary_dilation(state.reshape(shape).astype(bool),
                              structure=np.ones((3, 3, 3), bool)).ravel()
    waiting = np.flatnonzero(dil & allowed & (state == 0))
    del dil
    in_fr = np.zeros(state.size, bool)  # in the front (active or waiting)
    in_fr[waiting] = True
    mark = np.zeros(state.size, np.int32)  # scratch for de-duplication
    active = np.empty(0, np.int64)
    for t in levels:
        go = prio[waiting] <= t
        active = np.concatenate([active, waiting[go]])
        waiting = waiting[~go]
        while len(active):
            par = parity[active]
            added = []
            for sub in range(8):
                c = active[par == sub]
                if len(c) == 0:
                    continue
                code = _codes_at(state, c, offs)
                if complement:
                    code ^= _ALL26
                a = c[_lookup(table, code)]
                if len(a):
                    state[a] = 1
                    added.append(a)
            if not added:
                break
            new = np.concatenate(added)
            in_fr[new] = False
            nb = (new[:, None] + offs[None, :]).ravel()
            nb = nb[allowed[nb] & ~in_fr[nb]]
            nb = nb[state[nb] == 0]
            mark[nb] = np.arange(len(nb), dtype=np.int32)
            nb = nb[mark[nb] == np.arange(len(nb), dtype=np.int32)]
            in_fr[nb] = True
            go = prio[nb] <= t
            active = np.concatenate([active[in_fr[active]], nb[go]])
            waiting = np.concatenate([waiting, nb[~go]])


def _is_ball(mask3: np.ndarray, connectivity: int) -> bool:
    comps, cavities, tunnels = topology_counts(mask3, connectivity=connectivity)
    return comps == 1 and cavities == 0 and tunnels == 0


def _correct(m3: np.ndarray, ev3: np.ndarray, connectivity: int, n_bands: int):
    """Correction on a crop padded by 2; returns the ball mask and counts."""
    shape = m3.shape
    table = simple_point_table()
    kw = dict(shape=shape, parity=_parity(shape), offs=_flat_offsets(shape), table=table,
              n_bands=n_bands)
    obj = m3.ravel()
    ev = ev3.ravel()
    fg_complement = connectivity == 6
    seed = int(np.flatnonzero(obj)[np.argmax(ev[obj])])

    def grow_object(region):
        f = np.zeros(obj.size, np.uint8)
        f[seed] = 1
        allowed = region.copy()
        allowed[seed] = False
        _grow(f, allowed, -ev, complement=fg_complement, **kw)
        return f.astype(bool)

    f = grow_object(obj)
    shell = np.ones(shape, bool)
    shell[1:-1, 1:-1, 1:-1] = False
    shell = shell.ravel()
    b = shell.astype(np.uint8)
    _grow(b, ~obj & ~shell, ev, complement=not fg_complement, **kw)
    b = b.astype(bool)
    cut = obj & ~f
    fill = ~obj & ~b
    info = dict(clusters_filled=0, clusters_cut=0, regrown=False)
    if not cut.any() and not fill.any():
        return m3.copy(), info
    lab, n = ndi.label((cut | fill).reshape(shape), structure=np.ones((3, 3, 3), bool))
    lab = lab.ravel()
    n_cut = np.bincount(lab[cut], minlength=n + 1)
    n_fill = np.bincount(lab[fill], minlength=n + 1)
    do_fill = (n_cut == 0) | ((n_fill > 0) & (n_fill < n_cut))
    do_fill[0] = False
    chosen = obj.copy()
    fill_lab = do_fill[lab]
    chosen[fill_lab & fill] = True
    chosen[~fill_lab & cut] = False
    info["clusters_filled"] = int(do_fill[1:].sum())
    info["clusters_cut"] = int(n - do_fill[1:].sum())
    chosen3 = chosen.reshape(shape)
    if not _is_ball(chosen3, connectivity):
        logger.info("per-cluster choice is not a ball; growing the object inside it again")
        chosen3 = grow_object(chosen).reshape(shape)
        info["regrown"] = True
    return chosen3, info
