"""Area correction: bijective descent to a near area-preserving, low-shear sphere map.

Energy
------
For face ``f`` with surface-area share ``a_f`` (Σ a_f = 1) and unit-sphere vertices
``p, q, r`` let ``Ω_f = 2·atan2(d_f, 1 + p·q + q·r + r·p)`` be its spherical-triangle
area (solid angle; Van Oosterom & Strackee 1983), with ``d_f = det(p, q, r)`` (six times
the volume of the cone from the origin), ``D = Σ Ω_f`` (4π for a map of degree one) and
``ρ_f = (Ω_f/D)/a_f`` the area ratio (sphere share over surface share) — the same measure
the QC reports (:mod:`.qc`). With ``K_f`` the MIPS conformal distortion of the affine map
from the surface triangle to the chordal sphere triangle (Hormann & Greiner 2000),

    K_f = Σ_k cot θ_k |e_k|² / (2 d_f)   (θ_k surface angles, e_k opposite sphere edges),

which is ``(σ₁² + σ₂²)/(2σ₁σ₂) = cosh(log(σ₁/σ₂)) >= 1`` with equality iff the triangle
keeps its shape, we minimise

    E = Σ_f a_f [(ρ_f + 1/ρ_f − 2) + ψ(log ρ_f) + w · h(K_f)],   w = ``shear_weight``,

with the tail term ``ψ(u) = c·(|u| − u0)₊²`` (``u0 = SPHERE_AREA_TAIL_LOG`` = 0.25,
``c = SPHERE_AREA_TAIL_STIFFNESS`` = 10; zero for ``|log ρ| <= u0``, see "Tail of the
area ratio") and h(K) one of (``SPHERE_SHEAR_FORM``):

* ``"mips-bounded"`` (default): MIPS ``K − 1`` up to the knee ``K0 = SPHERE_SHEAR_KNEE``
  (4, an anisotropy σ₁/σ₂ ≈ 7.9), continued C¹ as ``(K0 − 1) + K0·(1 − K0/K)`` beyond
  (bounded by ``2·K0 − 1``);
* ``"mips-log"``: the same MIPS branch, continued C¹ as ``(K0 − 1) + K0·log(K/K0)``;
* ``"mips"``: ``K − 1`` everywhere (Hormann & Greiner 2000);
* ``"log"``: ``arccosh(K)² = (log σ₁/σ₂)²``.

``ρ + 1/ρ = 2 cosh(log ρ)`` penalises expansion and compression symmetrically in the
log ratio and grows without bound as ``Ω_f → 0⁺`` (``Ω_f`` and ``d_f`` vanish together):
a triangle cannot degenerate or flip along a descent path. The area part equals
``D·Σ a_f²/Ω_f − 1`` (the authalic energy; zero iff every ``ρ_f = 1``, by
Cauchy–Schwarz). For small shear
``K − 1 ≈ ½(log σ₁/σ₂)²``, so all the forms agree there up to a factor.

Why the knee: thin parts of real structures *must* be sheared to be area-preserved on
the sphere (the isoperimetric inequality bounds how short a loop enclosing a given
spherical area can be), and plain MIPS, which grows linearly in K, then buys shear with
area error — MNI left putamen SD 0.21, thalamus 1st percentile −0.35. A penalty that
grows only slowly for large K lets those parts shear. But the shear penalty
is also what makes the maps of *similar* shapes consistent: with the "log" form
everywhere (or a knee at 2.5 or below) the bundled demo study's known group
difference of the bent structure vanished from the spectra (two-sample |t| <= 1.7 at
every degree, against t up to 19 with MIPS), because a tube's twist along its length
becomes nearly free. Measured, demo at full size (15 per group, level 4), max |t| of
the bent structure / significant degrees: MIPS 19.1 / 7, knee 4: 18.8 / 7, knee 3:
18.9 / 8, knee 2.5: 1.7 / 0. The bent demo shapes reach K ≈ 2.5–3.9 (max over faces;
measured with the knee at 3), so the knee at 4 leaves them, and the synthetic test shapes, on the MIPS
branch, a margin above that cliff. MNI putamen / thalamus (w = 0.12): MIPS SD 0.214 /
0.085, 1st pct −0.46 / −0.35; knee 4: SD 0.12 / 0.074, 1st pct −0.28 to −0.31 (the
putamen's value depends on the coarse-to-fine start's settings) / −0.28 (knee 3:
0.108 / 0.071; knee 2: 0.094 / 0.064). The knee is part of the penalty's
form, not a second balance: ``w`` is the single balance parameter
(``defaults.SPHERE_SHEAR_WEIGHT``): ``w = 0`` is pure area preservation (uniform
sampling, large shear on elongated shapes), large ``w`` tends to the conformal map (no
shear, exponential area distortion).

Why bounded beyond the knee (measured on the MNI left putamen, 4,964 vertices, with the
``d_f`` area term of the next section; the percentiles below include its bias): with
"mips-log" the faces whose log area ratio exceeds 0.3 (2.4 % of them, in a few
patches of up to 126 faces, somewhat more often where the structure is thinner than
2 mm) are extremely sheared: median K 47 (anisotropy ~90), up to K ≈ 1,100, against
K 1.3 over all faces; they are neither small nor badly shaped surface triangles
(median area 0.83 of the median, min angle 44°). The tail is the optimum of the energy,
not a convergence failure: continuing the descent 3,000 iterations past the stall test
lowers E by 9 % but raises the 99th percentile from 0.42 to 0.52. On the log branch a
face's shear falls by ``w·K0`` per unit of log expansion however sheared it is, and
the neighbours of the sheared patches pay that in area: the tail shrinks with ``w``
(99th pct 0.42 / 0.34 / 0.20 at w = 0.12 / 0.06 / 0.03), barely with a steeper area
penalty (Degener et al.'s ``(ρ + 1/ρ)^θ``, normalised: 0.40 at θ = 8), and not with a
shear branch convex in log(σ₁/σ₂) (0.53–0.66). The bounded branch, whose pull
``K·h'(K) = K0²/K`` fades for very sheared faces, gives SD 0.125 → 0.105, 1st/99th pct
−0.31/0.42 → −0.28/0.35 and angle 25.2° → 22.5° on the putamen (thalamus SD 0.074 →
0.068, caudate 0.062 → 0.052; 40,000-vertex white-matter hemisphere SD 0.119 both,
1st/99th pct −0.28/0.41 → −0.30/0.37, 21.1° → 20.5°); below the knee the two forms are identical, so the
synthetic shapes and the bundled demo study (max K ≈ 3.9) map exactly as before.
The price: a few more faces are very sheared (putamen K > 20: 439 → 664 of 9,924
faces; max K 1,740; hemisphere max K ≈ 38,000), still bijective, the smallest ``d_f``
at 5 % (putamen) and 0.5 % (hemisphere) of the mean.
With the knee at 3 the bounded branch gives putamen SD 0.098, 1st/99th pct
−0.26/0.34 (not adopted: it would put the demo's bent shapes on the new branch,
inside the margin above the consistency cliff).

Which area: spherical triangle, not cone volume
-----------------------------------------------
The area term used ``d_f`` in place of ``Ω_f`` until the tails on thin anatomy were
traced to it: the two agree to second order in the triangle's size, but not on the
long slivers that the sheared parts of thin structures become on the sphere. A wedge of
opening ``ε`` and length ``L`` has ``d_f = ε·sin L`` but ``Ω_f = 2ε·tan(L/2)``, a ratio
``1/cos²(L/2)`` that the ``d_f`` energy does not see. On the ``d_f``-optimised MNI left
putamen the faces with log ratio > 0.3 (QC's exact measure) had sphere edges of median
0.48 rad and up to 1.4 rad, and ``log(Ω_f/(d_f/2))`` up to 0.55 (above 0.05 on half of
them); measured with ``d_f`` the same map's 99th percentile was 0.30, with ``Ω_f`` 0.35.
The change alone (on the coarse-to-fine start of that time, shear on its coarse levels;
SD, 1st/99th pct): left putamen 0.105, −0.28/0.35 → 0.101, −0.31/0.27; right putamen
0.100, −0.27/0.34 → 0.094, −0.26/0.29; WM left 0.119, −0.30/0.37 → 0.111, −0.29/0.35;
caudates and thalami within 0.004 in SD; synthetic shapes within 0.001 and 0.02°.
Cost: three dot products and an ``arctan2`` per face; the 10,242-vertex bent tube's map
took the same CPU time (0.57–0.59 s either way, load ~2). The shear term keeps
``d_f``: ``K_f`` is the distortion of the affine map onto the chordal triangle.

Tail of the area ratio
----------------------
With the spherical area (and the coarse-to-fine start's area-only coarse levels,
:mod:`.hierarchy`) the MNI left putamen's 99th percentile was still 0.29 and the right
WM hemisphere missed both percentile targets (−0.34/0.41): the faces of thin, sheared
parts settle where the shear term's pull balances the area term's restoring force, and
``ρ + 1/ρ − 2 ≈ (log ρ)²`` is soft at |log ρ| ≈ 0.3 (the tail shrinks with ``w``, see
above, but ``w`` is the balance of every face). ψ steepens the area penalty only beyond
``u0``: its curvature there rises from ~2 to ``2 + 2c``, as if the shear weight of
those faces were ~11 times smaller; the bulk (|log ρ| <= u0) is unchanged. It is used
only in the last fine solve: :func:`continue_on_tail` continues the converged map on
``E`` with ψ when any face is beyond ``u0`` and returns the map unchanged otherwise (ψ
and its gradient vanish near such a map, so it is stationary for ``E`` as well). The
coarse grids (:mod:`.multires`) and the coarse-to-fine levels solve ``E`` without ψ:
their binned area shares are noisy and ψ there acted on that noise — measured with ψ
in every problem, the 10,242-vertex bent tube (whose map has no face beyond 0.17) took
one more coarse cycle and 81 → 124 iterations, 10–25 % more CPU; as a continuation it
costs nothing on such shapes (same map, CPU 0.46–0.52 s either way, load 3).
Measured (w = 0.12; SD, 1st/99th percentile, mean angle °; "before" the cone-volume
area term with shear on the coarse levels, "Ω" the spherical area with area-only coarse
levels and no ψ, "Ω + ψ" the default; MNI surfaces as ``tests/test_sphere_anatomy.py``
builds them, hemispheres with 40,000 vertices; synthetic shapes at level 4):

================  ======================  ======================  ======================
surface           before                  Ω                       Ω + ψ (default)
================  ======================  ======================  ======================
putamen left      0.105 −0.28/0.35 22.5   0.092 −0.26/0.29 21.9   0.086 −0.25/0.26 22.0
putamen right     0.100 −0.27/0.34 22.3   0.089 −0.26/0.25 22.2   0.083 −0.25/0.25 22.4
caudate left      0.052 −0.21/0.10 15.6   0.056 −0.22/0.09 15.7   0.051 −0.20/0.10 15.8
caudate right     0.051 −0.19/0.09 15.5   0.052 −0.20/0.10 15.6   0.050 −0.20/0.10 15.6
thalamus left     0.068 −0.24/0.16 15.7   0.068 −0.24/0.16 15.7   0.065 −0.24/0.17 15.7
thalamus right    0.069 −0.25/0.16 15.6   0.069 −0.25/0.16 15.6   0.065 −0.24/0.16 15.6
WM left           0.119 −0.30/0.37 20.5   0.093 −0.26/0.28 21.9   0.082 −0.25/0.26 21.9
WM right          0.082 −0.25/0.24 18.6   0.127 −0.34/0.41 25.7   0.082 −0.25/0.26 23.5
6:1 ellipsoid     0.0985 −0.27/0.08 33.21 0.0977 −0.26/0.08 33.23 0.0964 −0.25/0.08 33.26
3:1 bent tube     0.0473 −0.15/0.06 19.92 0.0468 −0.15/0.06 19.93 (no face beyond u0)
bumpy             0.0271 −0.06/0.06 9.27  0.0272 −0.06/0.06 9.26  (no face beyond u0)
================  ======================  ======================  ======================

The right hemisphere met the targets before; with Ω on the earlier coarse-to-fine start
its fine solve did not converge in SPHERE_AREA_MAX_ITER (ConvergenceError, E 0.078),
and on the current start it stops at the poor map of the "Ω" column; ψ's continued
solve (~1,200 iterations) brings it back. CPU (one thread, load ~3): WM left 112 → 129
s, right 85 → 140 s (before: 133 s); putamen ~7–8 s either way. The caudate and thalamus change
with ψ although their percentiles are inside ``u0``: a few faces are beyond it, and the
continued solve also runs on past the first solve's stall test. The demo study at full
size: bent structure max |t| 19.1 (before) / 19.6 (Ω) / 19.65 (Ω + ψ), 8 significant
degrees each, the null structure 0.87–0.88 and none; its bent shapes' worst 1st
percentile is −0.25, at ``u0``, so ψ barely touches them. The constants, measured with ψ
as a continuation on the spherical-area maps of the earlier coarse-to-fine start (left /
right putamen, whose percentiles were then −0.31/0.27 and −0.26/0.29): ``u0`` = 0.2
gives −0.23/0.23 and −0.22/0.22 but moves the 6:1 ellipsoid's tips (33.23° → 33.39°) and
most of the demo's bent shapes; ``u0`` = 0.25 with ``c`` = 3 / 10 / 30 / 100: 99th pct
0.270 / 0.259 / 0.255 / 0.251 (left) and 0.276 / 0.264 / 0.254 / 0.250 (right), at 70 /
129 / 176 / 309 continued iterations (left): from ``c`` ≈ 10 the percentiles sit at
``u0`` whatever ``c``, so ``u0`` is the tolerance on the log ratio and ``c`` only how
firmly it holds. A cubic hinge ``c·(|u| − u0)₊³`` (C²) was weaker at the same ``c``
(left putamen −0.29/0.28 at ``c`` = 30). ``w`` stays the single balance parameter.

Area–angle frontier
-------------------
The issue's "mean angle distortion <= 20° on elongated shapes at area SD <= 0.10" is
met by the 3:1 bent tube (19.9° at SD 0.047) but cannot be met by a 6:1 ellipsoid with
any ``w`` of this energy. Measured at level 4 (``benchmarks/sphere_map.py --tradeoff``;
mean angle ° at area SD):

=============  ============  ============  ============  ============  ===============
shape          w = 0.03      w = 0.12      w = 0.25      w = 1.0       isoperimetric
=============  ============  ============  ============  ============  ===============
3:1 ellipsoid  20.8 @ 0.012  20.1 @ 0.044  19.3 @ 0.084  16.4 @ 0.24  22.2
4:1 ellipsoid  26.8 @ 0.018  25.8 @ 0.064  24.8 @ 0.119  21.2 @ 0.32  29.2
6:1 ellipsoid  34.5 @ 0.028  33.2 @ 0.099  31.8 @ 0.179  27.4 @ 0.44  38.8
3:1 bent tube  20.6 @ 0.014  19.9 @ 0.047  19.1 @ 0.090  16.3 @ 0.25  —
=============  ============  ============  ============  ============  ===============

The last column is what exact area preservation forces if the stretch is uniform along
each cross-section loop: a loop of radius ρ enclosing the area share f must map to a
loop at least 2πR·2√(f(1−f)) long on the sphere of equal area (the spherical
isoperimetric inequality, Schmidt 1943), so its tangential stretch is at least that
ratio and, with area kept, the anisotropy its square; averaged for equilateral
triangles. The maps beat that estimate by 2–11° because the mean |Δangle| saturates
(uneven stretch along a loop pays off) and some area error is allowed, but the frontier
is flat: at SD <= 0.10 the 6:1 ellipsoid cannot get below ~33° with this energy, and
even SD 0.44 buys only 27°. Going further would mean concentrating the shear into a
seam, which breaks the consistency of the maps across similar shapes that the
descriptors need; we do not. The energy itself has such maps: a second, lower minimum
in which an elongated shape *winds* around the sphere like a strip (6:1 ellipsoid
14.0° at SD 0.191; demo arc 12.6° at SD 0.149, energy 0.043 against the polar map's
0.085). It is reached from starts other than the centred conformal map, and its
winding has no canonical direction (forced on 10 demo arcs, 9 maps landed 27–35° from
their polar maps, spectra 4–31 between-subject SDs apart), so the chain is built to
reach the polar minimum from every start (see :mod:`.hierarchy`, "Why no shear on the
coarse levels"). The issue's 20° is therefore met up to ~3:1 (tube 19.9°, 3:1
ellipsoid 20.1°) and not on the 6:1 ellipsoid or the demo arc (28.7°).

Solver
------
Points stay on the sphere through the retraction ``x ↦ (x + t·d)/|x + t·d|`` of tangent
directions ``d``. Directions come from limited-memory BFGS (Nocedal & Wright 2006,
Alg. 7.4) whose initial inverse Hessian is a Sobolev (Laplacian) preconditioner
``(L + εM)⁻¹`` built from the *surface* cotangent Laplacian — the Hessian of the
Dirichlet energy of the map, as in the quadratic-proxy methods of Kovalsky et al.
(2016) — factorised once with SuperLU and reused at every iteration. The
preconditioner turns the exponentially compressed regions of the centred conformal map
into smooth, large-scale motions, which plain gradient descent needs thousands of steps
for. A backtracking (Armijo) line search rejects any step that makes a triangle's
``d_f <= 0``, so the map is bijective after every accepted step (all ``d_f > 0`` and
degree one).

References
----------
Hormann, K. & Greiner, G. (2000). MIPS: an efficient global parametrization method.
In *Curve and Surface Design: Saint-Malo 1999*, 153–162.
Degener, P., Meseth, J. & Klein, R. (2003). An adaptable surface parameterization
method. *Proc. 12th International Meshing Roundtable*, 201–213.
Kovalsky, S. Z., Galun, M. & Lipman, Y. (2016). Accelerated quadratic proxy for
geometric optimization. *ACM Trans. Graph.* 35(4), 134. doi:10.1145/2897824.2925920
Schmidt, E. (1943). Beweis der isoperimetrischen Eigenschaft der Kugel im hyperbolischen
und sphärischen Raum jeder Dimensionszahl. *Math. Z.* 49, 1–109. doi:10.1007/BF01174192
Nocedal, J. & Wright, S. J. (2006). *Numerical Optimization*, 2nd ed., Springer.
doi:10.1007/978-0-387-40065-5
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, replace

import numpy as np
import scipy.sparse as sp

from ..defaults import (SPHERE_AREA_ABS_TOL, SPHERE_AREA_MAX_ITER, SPHERE_AREA_REL_TOL, SPHERE_AREA_STALL_WINDOW,
                        SPHERE_AREA_TAIL_LOG, SPHERE_AREA_TAIL_STIFFNESS,
                        SPHERE_LBFGS_MEMORY, SPHERE_MIN_REL_DET, SPHERE_PRECOND_MASS,
                        SPHERE_SHEAR_FORM,
                        SPHERE_SHEAR_KNEE)
from ..errors import ConvergenceError
from .laplacian import triangle_cotangents
from .linsolve import factorise

#: (form, knee) of the shear penalty, from defaults (a list so tests and measurements can
#: swap it, e.g. ``monkeypatch.setattr(area, "_FORM", ["mips", 4.0])``)
_FORM = [SPHERE_SHEAR_FORM, SPHERE_SHEAR_KNEE]
#: (u0, c) of the area tail term, from defaults (a list so tests can swap it, as _FORM)
_TAIL = [SPHERE_AREA_TAIL_LOG, SPHERE_AREA_TAIL_STIFFNESS]
__all__ = ["AreaProblem", "AreaResult", "continue_on_tail", "correct_area"]


@dataclass(frozen=True)
class AreaResult:
    """Output of :func:`correct_area`.

    Attributes
    ----------
    sphere_vertices : ndarray, shape (V, 3)
    iterations : int
    energy_start, energy_end : float
        Energy ``E`` (dimensionless) before and after.
    n_flipped_max : int
        Largest number of flipped faces seen in any *accepted* iterate (0 by construction).
    """

    sphere_vertices: np.ndarray
    iterations: int
    energy_start: float
    energy_end: float
    n_flipped_max: int


class AreaProblem:
    """Energy, gradient and preconditioner of the area correction for one mesh.

    Parameters
    ----------
    vertices : ndarray, shape (V, 3)
        Original surface (mm).
    faces : ndarray, shape (F, 3)
    shear_weight : float
        ``w`` in the energy (>= 0).
    laplacian : sparse (V, V), optional
        Positive-weight surface Laplacian (reused from the conformal step).
    what : str
        Name of the surface for error messages.
    area_shares : ndarray, shape (F,), optional
        Target shares instead of the surface's own face areas (coarse problems).
    tail : bool
        Include the tail term ``Σ a_f ψ(log ρ_f)`` (:func:`continue_on_tail` switches it
        on for the last fine solve; coarse problems never use it).
    """

    def __init__(self, vertices, faces, *, shear_weight: float, laplacian=None, what: str,
                 area_shares: np.ndarray | None = None, tail: bool = False):
        self.faces = faces
        self.n = len(vertices)
        p = [vertices[faces[:, k]] for k in range(3)]
        area = 0.5 * np.linalg.norm(np.cross(p[1] - p[0], p[2] - p[0]), axis=1)
        if area_shares is None:
            area = np.maximum(area, 1e-12 * area.mean())
            self.a = area / area.sum()
        else:
            self.a = np.asarray(area_shares, dtype=np.float64) / np.sum(area_shares)
        self.a2 = self.a**2
        cot = triangle_cotangents(vertices, faces)
        # a (near-)degenerate reference triangle has no usable shape: compare with an
        # equilateral one instead (cot 60° = 1/√3), which keeps Σ cot|e|² > 0
        bad = area <= 1e-9 * max(area.mean(), 1e-300)
        cot[bad] = 1.0 / np.sqrt(3.0)
        self.cot = cot
        self.w = float(shear_weight)
        nf = len(faces)
        # scatter matrix from per-corner gradients (3F, 3) to vertices (V, 3)
        self.scatter = sp.csr_matrix(
            (np.ones(3 * nf), (faces.T.ravel(), np.arange(3 * nf))), shape=(self.n, 3 * nf))
        self.what = what
        self.tail = bool(tail)
        self._precond = None
        self._laplacian = laplacian
        self._vertex_area = None
        if laplacian is not None:
            va = np.zeros(self.n)
            for k in range(3):
                va += np.bincount(faces[:, k], weights=self.a / 3, minlength=self.n)
            self._vertex_area = va

    # ------------------------------------------------------------------ energy
    def dets(self, x: np.ndarray) -> np.ndarray:
        f = self.faces
        return _dot(_take(x, f[:, 0]), _cross(_take(x, f[:, 1]), _take(x, f[:, 2])))

    def log_ratio(self, x: np.ndarray) -> np.ndarray:
        """``log ρ_f`` (F,) at unit vectors ``x`` (every ``d_f > 0``): the QC's face measure."""
        f = self.faces
        pa, pb, pc = _take(x, f[:, 0]), _take(x, f[:, 1]), _take(x, f[:, 2])
        om = _solid_angles(pa, pb, pc, _dot(pa, _cross(pb, pc)))[0]
        return self._log_ratio(om, om.sum())

    def _log_ratio(self, om: np.ndarray, total: float) -> np.ndarray:
        """``log ρ_f`` from the faces' solid angles ``om`` (F,) and their sum."""
        return np.log(om / (total * self.a))

    def energy(self, x: np.ndarray, det: np.ndarray | None = None) -> float:
        """Energy at unit vectors ``x`` (V, 3); ``inf`` when a face has ``d_f <= 0``."""
        f = self.faces
        pa, pb, pc = _take(x, f[:, 0]), _take(x, f[:, 1]), _take(x, f[:, 2])
        if det is None:
            det = _dot(pa, _cross(pb, pc))
        if det.min() <= 0.0:
            return np.inf
        om = _solid_angles(pa, pb, pc, det)[0]
        e = om.sum() * np.sum(self.a2 / om) - 1.0
        if self.tail:
            e += np.sum(self.a * _tail(self._log_ratio(om, om.sum()))[0])
        if self.w:
            q = (self.cot[:, 0] * _sq(pc - pb) + self.cot[:, 1] * _sq(pa - pc)
                 + self.cot[:, 2] * _sq(pb - pa))
            e += self.w * np.sum(self.a * _shear(q / (2.0 * det))[0])
        return float(e)

    def energy_grad(self, x: np.ndarray, *, allow_flip: bool = False):
        """Energy and its tangent gradient (V, 3) at unit vectors ``x``.

        With ``allow_flip`` a flipped face gives ``(inf, None)`` instead of an error
        (the line search's trial points).
        """
        f = self.faces
        pa, pb, pc = _take(x, f[:, 0]), _take(x, f[:, 1]), _take(x, f[:, 2])
        bxc = _cross(pb, pc)
        det = _dot(pa, bxc)
        if det.min() <= 0.0:  # (before the other two cross products: a rejected trial)
            if allow_flip:
                return np.inf, None
            raise ConvergenceError(f"{self.what}: area correction reached a flipped face")
        cxa, axb = _cross(pc, pa), _cross(pa, pb)
        # solid angle Ω = 2 atan2(det, den) (Van Oosterom & Strackee 1983) and its partials
        om, den = _solid_angles(pa, pb, pc, det)
        r2 = 2.0 / (det * det + den * den)
        D = om.sum()
        S = np.sum(self.a2 / om)
        e = D * S - 1.0
        beta = S - D * self.a2 / om**2  # dE/dΩ per face
        if self.tail:
            psi, dpsi = _tail(self._log_ratio(om, D))
            e += np.sum(self.a * psi)
            ad = self.a * dpsi  # d(Σ a ψ)/dΩ_f = a_f ψ'(u_f)/Ω_f − Σ_g a_g ψ'(u_g)/D
            beta = beta + ad / om - np.sum(ad) / D
        bd = beta * den * r2  # ... times dΩ/d det
        bn = (-beta * det * r2)[:, None]  # ... times dΩ/d den (d den/da = b + c, ...)
        if self.w:
            eab, ebc, eca = pb - pa, pc - pb, pa - pc
            c0, c1, c2 = self.cot[:, 0:1], self.cot[:, 1:2], self.cot[:, 2:3]
            q = c0[:, 0] * _sq(ebc) + c1[:, 0] * _sq(eca) + c2[:, 0] * _sq(eab)
            h, dh = _shear(q / (2.0 * det))
            e += self.w * np.sum(self.a * h)
            wad = self.w * self.a * dh  # d(shear)/dK per face, times w·a
            bd = bd - wad * q / (2.0 * det**2)
            gam = (wad / det)[:, None]  # dK/dq = 1/(2 det), times 2 from d|e|²
            bd = bd[:, None]
            ga = bd * bxc + bn * (pb + pc) + gam * (c1 * eca - c2 * eab)
            gb = bd * cxa + bn * (pc + pa) + gam * (c0 * (-ebc) + c2 * eab)
            gc = bd * axb + bn * (pa + pb) + gam * (c0 * ebc - c1 * eca)
        else:
            bd = bd[:, None]
            ga = bd * bxc + bn * (pb + pc)
            gb = bd * cxa + bn * (pc + pa)
            gc = bd * axb + bn * (pa + pb)
        g = self.scatter @ np.concatenate([ga, gb, gc])
        g -= np.einsum("ij,ij->i", g, x)[:, None] * x
        return float(e), g

    # ------------------------------------------------------------------ preconditioner
    def precondition(self, g: np.ndarray, x: np.ndarray) -> np.ndarray:
        """Apply ``(L + εM)⁻¹`` to each coordinate of ``g`` and project to the tangent planes."""
        if self._laplacian is None:
            return g
        if self._precond is None:
            L = self._laplacian
            m = self._vertex_area / self._vertex_area.mean()
            eps = SPHERE_PRECOND_MASS * L.diagonal().mean()
            self._precond = factorise(L + sp.diags(eps * m), what=f"{self.what}: area "
                                      "correction (preconditioner)")
        h = self._precond(g)
        h -= np.einsum("ij,ij->i", h, x)[:, None] * x
        return h


def _solid_angles(pa, pb, pc, det):
    """Solid angles Ω (F,) of the geodesic triangles (pa, pb, pc) (each (F, 3), unit
    vectors) with ``det = det(pa, pb, pc)``, as ``2·atan2(det, den)`` (Van Oosterom &
    Strackee 1983), and ``den = 1 + pa·pb + pb·pc + pc·pa`` (for the gradient)."""
    den = 1.0 + _dot(pa, pb) + _dot(pb, pc) + _dot(pc, pa)
    return 2.0 * np.arctan2(det, den), den


def _tail(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Tail term ψ(u) = c·(|u| − u0)₊² of the log area ratio ``u`` and dψ/du.

    ``(u0, c) = (SPHERE_AREA_TAIL_LOG, SPHERE_AREA_TAIL_STIFFNESS)``; zero for
    ``|u| <= u0``, C¹ there.
    """
    u0, c = _TAIL
    t = np.maximum(np.abs(u) - u0, 0.0)
    return c * t * t, (2.0 * c) * t * np.sign(u)


def _shear(K: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Shear penalty h(K) and dh/dK, of the form ``defaults.SPHERE_SHEAR_FORM``.

    ``"mips-bounded"`` (default): K − 1 up to ``SPHERE_SHEAR_KNEE``, then C¹ bounded;
    ``"mips-log"``: the same, then C¹ logarithmic; ``"mips"``: h = K − 1 (Hormann &
    Greiner 2000); ``"log"``: h = arccosh(K)² = (log σ₁/σ₂)².
    ``K = (σ₁² + σ₂²)/(2σ₁σ₂) = cosh(log(σ₁/σ₂))``; values below 1 (round-off, or the
    ``det`` vs chordal-area gap on large faces) count as 1.
    """
    t = np.maximum(K - 1.0, 0.0)
    form = _FORM[0]
    if form == "mips":
        return t, np.ones_like(t)
    if form == "mips-log":
        k0 = _FORM[1]
        big = K > k0
        Kb = np.where(big, K, k0)
        h = np.where(big, (k0 - 1.0) + k0 * np.log(Kb / k0), t)
        return h, np.where(big, k0 / Kb, 1.0)
    if form == "mips-bounded":
        k0 = _FORM[1]
        big = K > k0
        r = k0 / np.where(big, K, k0)
        h = np.where(big, (k0 - 1.0) + k0 * (1.0 - r), t)
        return h, np.where(big, r * r, 1.0)
    if form != "log":
        raise ValueError(f"unknown shear penalty form {form!r} (defaults.SPHERE_SHEAR_FORM); "
                         "use 'mips-bounded', 'mips-log', 'mips' or 'log'")
    ac = np.arccosh(1.0 + t)
    small = t < 1e-6
    safe = np.where(small, 1.0, t * (t + 2.0))
    dh = np.where(small, 2.0 - (2.0 / 3.0) * t, 2.0 * ac / np.sqrt(safe))
    return ac**2, dh


def _vdot(a: np.ndarray, b: np.ndarray, out: np.ndarray | None = None) -> float:
    """Inner product by numpy's own pairwise summation, not BLAS: the result does not
    depend on how many threads a BLAS library would split the sum into. ``out`` (same
    shape, C-contiguous) is scratch space for the products; for C-ordered ``a``, ``b`` the
    sum is bit for bit that of ``np.sum(a * b)`` (same values, same pairwise order)."""
    # np.add.reduce is what np.sum calls, without its argument handling (~10 µs a call)
    if out is None:
        return float(np.add.reduce(a * b, axis=None))
    np.multiply(a, b, out=out)
    return float(np.add.reduce(out, axis=None))


def _take(x: np.ndarray, index: np.ndarray) -> np.ndarray:
    """Rows ``x[index]`` (the same values), by ``np.take``: 3-5x faster than fancy
    indexing for (n, 3) gathers (measured at 160k vertices)."""
    return np.take(x, index, axis=0)


def _cross(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise cross product of (n, 3) arrays (faster than ``np.cross`` for this shape)."""
    out = np.empty_like(a)
    out[:, 0] = a[:, 1] * b[:, 2] - a[:, 2] * b[:, 1]
    out[:, 1] = a[:, 2] * b[:, 0] - a[:, 0] * b[:, 2]
    out[:, 2] = a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]
    return out


def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return a[:, 0] * b[:, 0] + a[:, 1] * b[:, 1] + a[:, 2] * b[:, 2]


def _sq(v: np.ndarray) -> np.ndarray:
    return v[:, 0] ** 2 + v[:, 1] ** 2 + v[:, 2] ** 2


def _retract(x: np.ndarray, d: np.ndarray, t: float) -> np.ndarray:
    y = x + t * d
    return y / np.linalg.norm(y, axis=1, keepdims=True)


def correct_area(problem: AreaProblem, x0: np.ndarray, *, max_iter: int = SPHERE_AREA_MAX_ITER,
                 rel_tol: float = SPHERE_AREA_REL_TOL, abs_tol: float = SPHERE_AREA_ABS_TOL,
                 window: int = SPHERE_AREA_STALL_WINDOW,
                 memory: int = SPHERE_LBFGS_MEMORY, precondition: bool = True,
                 lbfgs: bool = True, raise_on_budget: bool = True) -> AreaResult:
    """Minimise the area/shear energy from the bijective start ``x0`` (V, 3).

    Parameters
    ----------
    problem : AreaProblem
    x0 : ndarray, shape (V, 3)
        Unit vectors with every face positively oriented.
    max_iter, rel_tol, abs_tol, window :
        Stop when ``E[k − window] − E[k] <= rel_tol · E[k] + abs_tol``; if that has not happened
        after ``max_iter`` iterations raise :class:`ConvergenceError` (or return, with
        ``raise_on_budget=False``, as the benchmark's fixed-budget baseline does).
    memory : int
        L-BFGS pairs kept.
    precondition, lbfgs : bool
        Switches used by the benchmark's baselines (plain / preconditioned gradient
        descent on the same energy with the same line search).

    Returns
    -------
    AreaResult
    """
    x = np.array(x0, dtype=np.float64)
    e, g = problem.energy_grad(x)
    e_start = e
    # history pairs (s, y) with their sᵀy, each computed once when the pair is stored;
    # ``tmp`` is scratch for the inner products and updates (no (V, 3) temporaries)
    hist_s, hist_y, hist_sy = [], [], []
    tmp = np.empty_like(x)
    energies = [e]
    it = 0
    gamma = None
    converged = False
    while it < max_iter:
        it += 1
        # ---- two-loop recursion (Nocedal & Wright Alg. 7.4) with preconditioned H0
        q = g.copy()
        alphas = []
        for s, y, sy in zip(reversed(hist_s), reversed(hist_y), reversed(hist_sy)):
            a = (1.0 / sy) * _vdot(s, q, tmp)
            alphas.append(a)
            q -= np.multiply(a, y, out=tmp)
        r = problem.precondition(q, x) if precondition else q
        if hist_s:
            # scaling γ = sᵀy / yᵀH₀y of the initial inverse Hessian (Nocedal & Wright
            # eq. 7.20); with a preconditioner it costs a solve, so it is refreshed only
            # every few iterations (it changes slowly)
            if gamma is None or it % 8 == 0 or not precondition:
                y = hist_y[-1]
                hy = problem.precondition(y, x) if precondition else y
                gamma = hist_sy[-1] / _vdot(y, hy, tmp)
            r *= gamma
        else:
            gamma = None
        for s, y, sy, a in zip(hist_s, hist_y, hist_sy, reversed(alphas)):
            b = (1.0 / sy) * _vdot(y, r, tmp)
            r += np.multiply(a - b, s, out=tmp)
        d = -r
        slope = _vdot(g, d, tmp)
        if not slope < 0:  # not a descent direction: restart with the preconditioned gradient
            hist_s.clear()
            hist_y.clear()
            hist_sy.clear()
            gamma = None
            d = -(problem.precondition(g, x) if precondition else g)
            slope = _vdot(g, d, tmp)
        if not hist_s:
            # first step of a (re)start: limit the largest vertex move to 0.05 rad
            t = min(1.0, 0.05 / max(np.sqrt(np.max(np.einsum("ij,ij->i", d, d))), 1e-300))
        else:
            t = 1.0
        # ---- backtracking Armijo line search; flipped faces give E = inf -> rejected
        # (the gradient is computed with the trial energy: the first trial is usually taken)
        accepted = False
        for _ in range(60):
            x_new = _retract(x, d, t)
            e_new, g_new = problem.energy_grad(x_new, allow_flip=True)
            if e_new <= e + 1e-4 * t * slope:
                accepted = True
                break
            t *= 0.5
        if not accepted:
            # no decrease possible at machine precision: a stationary point, unless some
            # face is collapsed below what double precision resolves (then no step can
            # open it, and returning would pass off a broken map as converged)
            det = problem.dets(x)
            n_bad = int(np.sum(det <= SPHERE_MIN_REL_DET * det.mean()))
            if n_bad:
                raise ConvergenceError(
                    f"{problem.what}: area correction stalled with {n_bad} faces collapsed "
                    f"below {SPHERE_MIN_REL_DET:g} of the mean (energy {e:.4g}); no step in "
                    "double precision opens them, so the map is not returned. Please "
                    "report this surface")
            break
        s = x_new - x
        y = g_new - g
        sy = _vdot(s, y, tmp)
        if sy > 1e-12 * np.sqrt(_vdot(s, s, tmp) * _vdot(y, y, tmp)) and lbfgs:
            hist_s.append(s)
            hist_y.append(y)
            hist_sy.append(sy)
            if len(hist_s) > memory:
                hist_s.pop(0)
                hist_y.pop(0)
                hist_sy.pop(0)
        x, e, g = x_new, e_new, g_new
        energies.append(e)
        if len(energies) > window and energies[-1 - window] - e <= rel_tol * e + abs_tol:
            converged = True
            break
    if not accepted and it > 0:
        converged = True
    if not converged and raise_on_budget:
        raise ConvergenceError(f"{problem.what}: area correction did not converge in {max_iter} "
                               f"iterations (energy {e_start:.4g} -> {e:.4g}); check the mesh for "
                               "degenerate triangles (shapedesc check), and if it has none "
                               "please report this surface")
    n_flip = int(np.sum(problem.dets(x) <= 0))
    return AreaResult(x, it, e_start, e, n_flip)


def continue_on_tail(problem: AreaProblem, result, **options):
    """Continue a converged fine solve on the energy with the tail term, if it acts.

    Parameters
    ----------
    problem : AreaProblem
        The fine problem ``result`` was computed for (without the tail term).
    result : AreaResult or multires result
        Its solution (a frozen dataclass with ``sphere_vertices``, ``iterations``,
        ``energy_end`` and ``n_flipped_max``).
    **options
        Passed to :func:`correct_area`.

    Returns
    -------
    Same type as ``result``
        ``result`` itself when no face has ``|log ρ| > u0`` (there ψ and its gradient
        vanish, so the map is already stationary for the full energy); otherwise the
        map after :func:`correct_area` on the energy with the tail term, iterations
        added and ``energy_end`` that energy's.
    """
    x = result.sphere_vertices
    if np.abs(problem.log_ratio(x)).max() <= _TAIL[0]:
        return result
    full = copy.copy(problem)  # shares the arrays and the factorised preconditioner
    full.tail = True
    r = correct_area(full, x, **options)
    return replace(result, sphere_vertices=r.sphere_vertices,
                   iterations=result.iterations + r.iterations, energy_end=r.energy_end,
                   n_flipped_max=max(result.n_flipped_max, r.n_flipped_max))
