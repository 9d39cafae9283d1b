"""Tolerances and defaults: the one place for every number a user or test may ask about.

Each constant carries its unit and, where it comes from a paper, the citation.  Modules
import from here; nothing else defines a tolerance.  Sections are per module; keep each
section's constants together when you add one.
"""

from __future__ import annotations

# --------------------------------------------------------------------------- general
#: Largest number of bytes any reader will accept after decompression (bytes).
#: A gzip bomb inflating past this is refused. 2 GiB covers a 1 mm whole-head float32
#: volume many times over (common practice).
MAX_INPUT_BYTES: int = 2 * 1024**3

#: Default seed used by the CLI when the user gives none (any fixed integer works).
DEFAULT_SEED: int = 20261201

# --------------------------------------------------------------------------- harmonics
#: Default maximum degree of the shape expansion for subcortical-sized structures.
DEFAULT_DEGREE: int = 15
#: Largest degree ``describe`` accepts (the basis itself is tested to 200).
MAX_DEGREE: int = 120
#: Sphere positions may differ from unit length by this much before they are refused
#: (dimensionless). Float32 storage of a unit vector errs by ~1e-7; 1e-6 admits that
#: and still catches millimetre coordinates passed by mistake (common practice).
UNIT_VECTOR_TOL: float = 1e-6
#: A 3x3 matrix counts as a rotation when max|R^T R - I| is below this (dimensionless);
#: matrices built in float64 from angles are orthogonal to ~1e-15 (common practice).
ROTATION_ORTHOGONALITY_TOL: float = 1e-8
#: Memory budget of one chunk of basis rows in least-squares fits and evaluation
#: (bytes). 64 MiB keeps the 150,000-point, degree-40 fit far below 1 GB while the
#: BLAS calls stay large enough to run at full speed (measured, benchmarks/harmonics_fit.py).
SH_CHUNK_BYTES: int = 64 * 1024**2
#: A fit keeps its basis blocks for the residual pass when all of them fit in this many
#: bytes (else it rebuilds them chunk by chunk); 256 MiB (common practice).
SH_FIT_CACHE_BYTES: int = 256 * 1024**2
#: ``fit(method="auto")`` forms the normal matrix from point moments (ducc0) from this
#: degree up, when there are more than twice as many points as nodes of the degree-2L
#: Gauss-Legendre grid; below it the direct n·K² accumulation is faster (measured,
#: benchmarks/harmonics_fit.py: crossover near degree 20 on one core).
SH_FIT_MOMENTS_MIN_DEGREE: int = 20
#: Requested accuracy of ducc0's non-uniform (NUFFT-based) point transforms
#: ``synthesis_general``/``adjoint_synthesis_general`` (relative; dimensionless). ducc0
#: accepts > 2e-13 in double precision; measured error 6e-14..8e-14 relative to the largest
#: coefficient at degrees 15-80 (tests/test_harmonics_fit.py), i.e. a few hundred eps.
SH_NUFFT_EPSILON: float = 2.5e-13
#: ``fit(method="cg")`` stops when every channel's normal-equation residual is below this
#: fraction of its right-hand side (dimensionless). Coefficient error <= cond x this; the
#: residual computed in float64 levels off near 1e-15 (measured on the sphere maps of
#: benchmarks/describe.py), so 1e-13 is reached reliably and costs ~2 more iterations
#: than 1e-12 (common practice: stop a few digits above the rounding floor).
SH_FIT_CG_RTOL: float = 1e-13
#: ``fit(method="cg")`` is used only when the rigorous bound max(rho)/min(rho) of the
#: normal matrix's condition number (harmonics/pointsets.py) is at most this
#: (dimensionless); CG then needs at most ~0.5 sqrt(cond) ln(2/rtol) ~ 150 iterations.
#: Above it (or when rho is not positive everywhere) the exact direct/moments path runs.
#: Area-corrected sphere maps of meshes give 1.1-1.3 (measured, benchmarks/describe.py).
SH_FIT_CG_MAX_CONDITION: float = 100.0
#: Normal equations whose Jacobi-scaled reciprocal condition number (LAPACK dpocon) is
#: below this are solved by eigen-decomposition instead of Cholesky (dimensionless).
#: Cholesky on normal equations loses ~cond·eps relative accuracy, so 1e-10 still leaves
#: ~1e-6 (common practice).
FIT_RCOND_MIN: float = 1e-10
#: In the eigen-decomposition fallback, eigenvalues below this fraction of the largest
#: are treated as zero (minimum-norm solution, dimensionless; ~1e4·eps, common practice).
FIT_EIG_RTOL: float = 1e-12
#: Coefficients of a real-valued function, converted complex -> real, may carry an
#: imaginary part of this size relative to the largest coefficient before the input is
#: refused as not real-valued (dimensionless; a few hundred eps, common practice).
SH_REAL_IMAG_TOL: float = 1e-12
#: Tikhonov weight of the shape fit (dimensionless, relative to the weighted data
#: term). 0: the area-weighted least-squares problem is well posed on our maps.
FIT_TIKHONOV: float = 0.0

# --------------------------------------------------------------------------- mesh
#: Vertices closer than this (per coordinate, after rounding to a grid of this step) are
#: duplicates and are merged (mm). 1e-5 mm is about the float32 resolution of
#: coordinates 100-150 mm from the origin, so copies of one point stored as float32
#: (STL, GIFTI) merge, while no anatomical mesh has distinct vertices this close
#: (common practice; trimesh merges on a rounded grid in the same way).
MERGE_TOLERANCE_MM: float = 1e-5

#: A face whose area is below this fraction of the squared bounding-box diagonal is
#: degenerate (dimensionless). 1e-12 of (100 mm)² is 1e-8 mm²: only faces collapsed to
#: a line or point, never a genuine small triangle (common practice).
DEGENERATE_FACE_REL_AREA: float = 1e-12

#: Largest boundary loop (in edges) that ``repair_mesh(fill_holes=True)`` closes
#: (edges). Small gaps such as a missing triangle or two; larger holes are refused
#: because filling them invents anatomy (common practice).
MAX_HOLE_EDGES: int = 16

#: Fewest vertices of a closed triangle surface (a tetrahedron has 4).
MIN_SURFACE_VERTICES: int = 4

#: An integer volume read as labels is flagged as a quantised probability/intensity map
#: (``IntensityLikeVolumeWarning``) when it holds at least this many distinct non-zero
#: values (count) and its neighbouring voxels step gradually (next constant). A
#: segmentation holds tens of labels; a probability map stored as 8-bit integers holds
#: nearly all of 1..255 (the MNI ICBM152 2009a tissue maps do).
LABEL_INTENSITY_MIN_DISTINCT: int = 64

#: The second condition: the median absolute difference between face-neighbouring voxels
#: that are both non-zero and differ is at most this fraction of the range of values
#: (dimensionless). Neighbouring parcels of a segmentation carry unrelated codes (median
#: step ~1/3 of the range for shuffled codes); a quantised probability map steps
#: gradually (measured: MNI ICBM152 2009a white-matter map at 1 mm, median step 9 of 255
#: = 0.035).
LABEL_INTENSITY_MAX_NEIGHBOUR_STEP_FRACTION: float = 0.1

# -- label volume -> genus-0 surface (shapedesc.mesh.topology, shapedesc.mesh.volume)
#: Object adjacency of the digital-topology pair (26 -> pair (26, 6); 6 -> (6, 26)).
#: (26, 6) is the pair under which thresholded anatomy has the fewer handles: 27 vs
#: 177 tunnels in the largest component of the template's left white matter (measured
#: with topology_counts; tests/test_mesh_volume.py checks that (26, 6) has fewer).
OBJECT_CONNECTIVITY: int = 26

#: Marching-cubes iso-levels on the 0/1 voxel array for each pair (dimensionless).
#: Trilinear interpolation of binary corner values puts the saddle of a face with two
#: diagonal object corners at 1/2 and the centre of a cube with two body-diagonal
#: corners at 1/4 (closed forms), so a level in (0, 1/4) joins object voxels across
#: faces, edges and corners = (26, 6), and a level in (3/4, 1) = (6, 26).  1/8 and 7/8
#: sit mid-way, far from the ties at 1/4, 1/2, 3/4; the pairing is checked exhaustively
#: in tests/test_mesh_topology.py (skimage's 'lewiner' method).
MARCHING_CUBES_LEVEL: dict = {26: 0.125, 6: 0.875}

#: Number of evidence bands (quantiles) the simple-point growth proceeds in (count).
#: Within a band the order is geometric (parity sweeps), so more bands follow the
#: evidence more closely.  Measured on the template's left-hemisphere white matter
#: (probability / distance evidence): 8 bands change 250 / 222 voxels, 24 bands
#: 308 / 230, 64 bands 269 / 230, all near 0.08 % of 315,429 and in the same time
#: (3-4 s CPU): the result is insensitive to it; 24 is a middle choice.
TOPOLOGY_EVIDENCE_BANDS: int = 24

#: Default Taubin smoothing iterations after marching cubes (count; 0 = none), with
#: lambda = 0.5, mu = -0.53 (Taubin, SIGGRAPH 1995, doi:10.1145/218380.218473: pass-band
#: k_PB = 1/lambda + 1/mu ~ 0.1, the values of the paper's examples).
SMOOTHING_ITERATIONS: int = 10
TAUBIN_LAMBDA: float = 0.5
TAUBIN_MU: float = -0.53

#: Largest normal offset used to give smoothed surfaces their pre-smoothing volume back
#: (voxels). Half a voxel restores strands one voxel thick (which any Laplacian filter
#: thins) while keeping the offset below the half-thickness of the thinnest part a voxel
#: set can have, so the surface cannot pass through itself (common practice).
SMOOTHING_MAX_OFFSET_VOXELS: float = 0.5

#: Edge-collapse decimation refuses a collapse that turns a face normal by more than
#: arccos(0.3) ~ 73 degrees (dimensionless cosine): folds (cos < 0) are never allowed,
#: and the margin keeps the staircase of marching-cubes meshes, whose neighbouring faces
#: meet at 90 degrees, collapsible (common practice in edge-collapse simplification).
DECIMATE_MIN_FACE_COS: float = 0.3

# --------------------------------------------------------------------------- sphere
#: Lower clamp of the cotangent edge weights, as a fraction of the mean weight
#: (dimensionless). Keeps every weight positive so the harmonic initial map is an
#: embedding (Floater 2003, doi:10.1090/S0025-5718-02-01466-7); 1e-3 changes only
#: non-Delaunay edges and keeps the matrix well conditioned (common practice).
SPHERE_COT_CLAMP: float = 1e-3

#: Fraction of the vertices, those nearest the pole opposite the puncture, held fixed in
#: the quasi-conformal pole correction (Choi, Lam & Lui 2015, doi:10.1137/130950008,
#: who use 1/10).
SPHERE_POLE_FIXED_FRACTION: float = 0.1

#: Stop Möbius centring when the area-weighted centre is this close to the origin
#: (unit-sphere radii); Newton converges quadratically, so 1e-12 costs one extra step.
SPHERE_MOBIUS_TOL: float = 1e-12
#: Largest number of Newton steps of the Möbius centring (Baden, Crane & Kazhdan 2018,
#: doi:10.1111/cgf.13495, report convergence in a handful of steps).
SPHERE_MOBIUS_MAX_ITER: int = 100

#: Default balance between the shear term and the area term of the area-correction
#: energy (dimensionless; 0 = area only). With the MIPS shear form, measured at level 4
#: (tests/test_sphere_map.py, benchmarks/sphere_map.py): w = 0.10/0.12/0.15/0.20 gives
#: area SD 0.084/0.098/0.118/0.151 on the 6:1 ellipsoid and mean angle distortion
#: 20.06/19.92/19.73/19.42 degrees on the 3:1 bent tube, so 0.12 meets both targets.
#: (With the "log" form 0.06 was the equivalent value.)
SPHERE_SHEAR_WEIGHT: float = 0.12
#: Form of the shear term: "mips-bounded" (MIPS up to SPHERE_SHEAR_KNEE, bounded C¹
#: continuation (K0 − 1) + K0(1 − K0/K) beyond; default), "mips-log" (logarithmic beyond
#: the knee), "mips" (K − 1; Hormann & Greiner 2000) or "log" ((log σ1/σ2)²). Pure "log"
#: lost the demo study's known group effect (maps of similar shapes not consistent).
#: Bounded vs log beyond the knee, MNI left putamen (with the former cone-volume area
#: term): SD 0.125 -> 0.105, 99th pct 0.42 -> 0.35 (the log branch's constant pull w·K0
#: on very sheared faces sets the tail); see shapedesc/sphere/area.py.
SPHERE_SHEAR_FORM: str = "mips-bounded"
#: Knee of the "mips-bounded"/"mips-log" shear forms (dimensionless MIPS distortion K; K = 4 is an
#: anisotropy σ1/σ2 ≈ 7.9): below it the penalty is MIPS (K − 1), above it it continues
#: C¹ (see SPHERE_SHEAR_FORM). Measured with "mips-log" (shapedesc/sphere/area.py): MNI
#: putamen / thalamus SD 0.214 / 0.085 with MIPS, 0.119 / 0.074 with knee 4; the demo
#: study's group effect is kept at knee 3 and 4 and lost at 2.5 (a cliff), so 4 leaves
#: a margin; synthetic test shapes stay below the knee.
SPHERE_SHEAR_KNEE: float = 4.0
#: QC of the sphere map: a face counts as strongly sheared when the affine map from its
#: surface triangle to its chordal sphere triangle stretches one direction this many
#: times more than the other (σ1/σ2, dimensionless; shapedesc/sphere/qc.py). Any
#: area-preserving map must shear a thin neck strongly (its short loops must enclose
#: sizeable sphere areas: spherical isoperimetric inequality), and there the energy is
#: nearly flat, so the map is not unique. Measured (MNI ICBM152, default map,
#: benchmarks/sphere_consistency.py): the share of surface area above 10 is 0.8–1.2 %
#: for the caudates and thalami, whose maps of a re-meshed copy agree to 1.0–1.5 deg
#: (mean), 7.7 / 8.8 % for the left / right putamen, whose copies' maps are 7.3 / 9.2 deg
#: apart, and 4.4 / 4.9 % for the 40,000-vertex WM hemispheres (left: 7.8 deg); no face
#: of the synthetic test shapes or the demo study comes near 10 (largest: 6:1 ellipsoid
#: 4.6, demo study 6.1, level 4).
SPHERE_SHEARED_ANISOTROPY: float = 10.0
#: ... and ``map_to_sphere`` warns (ShearedMapWarning; the pipeline writes it in
#: qc.tsv) when more than this share of the surface area is that strongly sheared
#: (dimensionless). 0.03 lies between the compact nuclei (<= 1.2 %) and the
#: hemisphere and putamens (>= 4.4 %) measured above; only these structures were.
SPHERE_SHEARED_SHARE_WARN: float = 0.03
#: Tail term of the area energy, ψ(u) = c·(|u| − u0)₊² of the face log area ratio u
#: (shapedesc/sphere/area.py, "Tail of the area ratio"): u0, where the area penalty
#: steepens (dimensionless log ratio). The issue's percentile target is |u| <= 0.3; with
#: u0 = 0.25 the MNI 1st/99th percentiles go from −0.26/0.29 to −0.25/0.26 (left
#: putamen), −0.26/0.28 to −0.25/0.26 (left WM hemisphere) and −0.34/0.41 to −0.25/0.26
#: (right WM hemisphere, which missed the targets), while the demo study's bent shapes
#: (1st percentile −0.21 on average, −0.25 at worst) stay nearly untouched; u0 = 0.2 also
#: moved the 6:1 ellipsoid's tips (angle +0.16°) and most demo shapes.
SPHERE_AREA_TAIL_LOG: float = 0.25
#: c of the tail term (dimensionless): beyond u0 the area penalty's curvature rises from
#: ~2 to 2 + 2c. Measured on the MNI putamen (left/right 99th pct 0.270/0.276 at c = 3,
#: 0.259/0.264 at 10, 0.255/0.254 at 30, 0.251/0.250 at 100): above ~10 the percentiles
#: sit at u0 whatever c, and larger c costs iterations (putamen 129 at 10, 309 at 100).
SPHERE_AREA_TAIL_STIFFNESS: float = 10.0
#: Area correction stops when the energy decreased by less than this fraction over the
#: last ``SPHERE_AREA_STALL_WINDOW`` iterations (dimensionless). Measured on the test
#: shapes: the face area-distortion SD changes by < 1e-4 between 1e-3 and 1e-6.
SPHERE_AREA_REL_TOL: float = 1e-3
#: ... or by less than this absolute amount (energy is dimensionless, ~ half the squared
#: log-area SD plus the weighted shear excess, so 1e-7 is far below what the QC can see);
#: needed because the area-only energy (shear_weight 0) tends to 0.
SPHERE_AREA_ABS_TOL: float = 1e-7
#: Window (iterations) of the stall test above.
SPHERE_AREA_STALL_WINDOW: int = 10
#: Iteration budget of the area correction's fine solves; reaching it without meeting
#: the stall test raises ConvergenceError (iterations). It decides nothing for a solve that
#: stalls earlier, so maps that converge are the same at any larger budget. Measured: the
#: 40,000-vertex MNI right WM hemisphere, re-meshed (midpoint-subdivided, decimated back),
#: got a poor coarse-to-fine start (fine solve stalled at area SD 0.64 after 184
#: iterations) and its tail continuation needed 3,919 iterations (SD 0.087, ~400 s CPU);
#: the budget was 3,000 before, so that surface failed.
SPHERE_AREA_MAX_ITER: int = 10000
#: L-BFGS memory (pairs); 5–20 is the usual range (Nocedal & Wright 2006, §7.2).
SPHERE_LBFGS_MEMORY: int = 10
#: Mass regularisation of the Laplacian preconditioner ``L + eps*M`` of the area
#: correction, relative to the mean diagonal of L over the mean vertex area
#: (dimensionless); small so that L dominates, nonzero so the matrix is invertible.
SPHERE_PRECOND_MASS: float = 1e-2
#: Icosphere levels of the coarse grids of the multiresolution area correction, coarse
#: to fine (level L has 10*4**L + 2 vertices); a level is used only when the mesh has at
#: least SPHERE_MULTIRES_RATIO times as many vertices.
SPHERE_MULTIRES_LEVELS: tuple = (3, 4, 5)
#: Smallest fine/coarse vertex-count ratio for a coarse grid to be used (dimensionless).
SPHERE_MULTIRES_RATIO: float = 8.0
#: Largest number of coarse corrections per level.
SPHERE_MULTIRES_CYCLES: int = 3
#: Stop correcting on a level when one correction gains less than this fraction of the
#: energy (dimensionless).
SPHERE_MULTIRES_MIN_GAIN: float = 0.1
#: Iteration budget of one coarse solve (iterations; coarse solves stop early anyway).
SPHERE_MULTIRES_COARSE_ITER: int = 300
#: Coarse faces hit by fewer fine face centroids than this take the sampled density
#: instead of the binned area share (faces; binning is noisy below a few samples).
SPHERE_MULTIRES_MIN_COUNT: int = 4
#: SuperLU column ordering for the sphere-map factorisations (``permc_spec``), used with
#: SuperLU's SymmetricMode; chosen by measurement in benchmarks/sphere_map.py (fill and
#: time on the mesh matrices; see shapedesc/sphere/linsolve.py for the table).
SPHERE_LU_ORDERING: str = "MMD_AT_PLUS_A"
#: The centred initial map is accepted when every face has det(a, b, c) above this
#: fraction of the mean det (dimensionless): 1e-12 keeps ~4 significant digits of the
#: smallest faces in double precision for the area correction to work with.
SPHERE_MIN_REL_DET: float = 1e-12
#: A triangle counts as flipped when det(a, b, c) of its unit-sphere vertices is below
#: this (unit-sphere volume units); 0 is the exact orientation test.
SPHERE_FLIP_DET: float = 0.0
#: Coarse-to-fine start (shapedesc/sphere/hierarchy.py), used when the conformal start is
#: crowded: candidate vertex counts of the coarsest surface, the largest whose Tutte map
#: is bijective and resolvable is used (count). Measured on the MNI WM hemisphere: the
#: 500-vertex level folded one big face near the puncture, 1000 and 300 did not.
SPHERE_HIERARCHY_COARSE_VERTICES: tuple = (1000, 500, 300, 200, 100)
#: Area-correct an intermediate level whenever the vertex count has grown by this factor
#: since the last correction (dimensionless).
SPHERE_HIERARCHY_GROWTH: float = 1.6
#: Area-correction iterations per intermediate level (the coarsest level gets ten times
#: as many). Measured on the MNI WM hemisphere: with 30 the start map was so uneven
#: (area SD ~1.4) that the 10,000-vertex version exhausted SPHERE_AREA_MAX_ITER and the
#: 40,000-vertex one took 300 s CPU (SD 0.134); with 100: 34 s (SD 0.114) and 205 s
#: (SD 0.119); with 200 (growth 2) the 40k fine solve stalled early (SD 0.185).
SPHERE_HIERARCHY_ITER: int = 100
#: After each round of vertex splits, faces whose ``det`` is below this fraction of the
#: mean are opened by a local pure-area descent of their own vertices before the level is
#: relaxed (dimensionless; shapedesc/sphere/hierarchy.py, ``_open_collapsed``). A split
#: halves its step up to 39 times, so ordinary splits stay far above 1e-6 (2^-20); the
#: one split of a 40,000-vertex MNI hemisphere that needed 29 halvings fell below it.
SPHERE_HIERARCHY_OPEN_REL_DET: float = 1e-6
#: Iteration budget of that local descent (it stops earlier when the energy stalls).
SPHERE_HIERARCHY_OPEN_ITER: int = 200

# --------------------------------------------------------------------------- descriptors
#: Side of the uniform grid cells of the point-to-mesh distance, in median face
#: bounding-box sizes (dimensionless). Speed only: the exactness certificate holds for
#: any value (shapedesc/mesh/distance.py); larger cells mean more faces per cell, smaller
#: ones more points whose distance ball crosses a cell boundary (measured,
#: benchmarks/describe.py).
DISTANCE_CELL_FACTOR: float = 1.0

#: Scale normalisations offered for descriptors: none, cube root of the enclosed volume,
#: square root of the surface area.
SCALE_CHOICES: tuple[str, ...] = ("none", "volume", "area")
DEFAULT_SCALE: str = "volume"

#: Two first-order ellipsoid semi-axes closer than this relative difference make the
#: canonical rotation unstable (dimensionless); 5 % is common practice for the
#: first-order-ellipsoid alignment of Brechbühler et al. 1995.
POSE_AXIS_TOLERANCE: float = 0.05

#: Relative third moment below which an axis's sign is called ambiguous (dimensionless).
POSE_SKEW_TOLERANCE: float = 1e-3

#: Subdivision level of the icosahedron that the reconstructions and QC measures use
#: (level 4: 2,562 vertices; level 5: 10,242).
DEFAULT_ICOSPHERE_LEVEL: int = 4
#: Level used to measure volume/area of a fitted surface (10,242 vertices).
MEASURE_ICOSPHERE_LEVEL: int = 5

# --------------------------------------------------------------------------- figures
#: Resolution of raster figure output (dots per inch). 300 dpi is the usual minimum
#: journals ask for in half-tone figures (common practice).
FIGURE_DPI: int = 300

#: Resolution of the images embedded in the HTML report (dots per inch). Screen use;
#: keeps the single-file report small (common practice).
REPORT_DPI: int = 110

#: (Figures mark corrected-significant degrees and regions at the stats section's
#: DEFAULT_ALPHA, so a figure and the log of `compare` always agree.)

#: Percentile of |value| that sets the symmetric colour limits of surface maps (%).
#: 99 keeps a few extreme vertices from washing out a map; values beyond are drawn in
#: the end colours and the colour bar shows arrows (common practice).
SURFACE_COLOUR_PERCENTILE: float = 99.0

#: Ambient and diffuse weights of the Lambert shading of surface renders (unitless,
#: sum 1 so a face turned to the light keeps its full colour; common practice).
SURFACE_AMBIENT: float = 0.35
SURFACE_DIFFUSE: float = 0.65

#: (Shape-mode figures use the stats section's PCA_MODE_SD, the multiple `compare`
#: writes its mode surfaces at.)

# --------------------------------------------------------------------------- pipeline
#: Significant digits of floats in the result tables (digits). Twelve keep far more than
#: any descriptor's accuracy (common practice for text tables). They do not by themselves
#: make reruns byte-identical (a last-bit difference still flips the 12th digit now and
#: then); that comes from a deterministic computation, see shapedesc.pipeline.work.
TABLE_FLOAT_DIGITS: int = 12

#: Text written for a missing value in a TSV table (the BIDS convention for n/a cells,
#: BIDS specification 1.9, "Tabular files").
TABLE_MISSING: str = "n/a"

#: Exit status of ``shapedesc describe`` is the number of failed subject x structure items,
#: capped here so it stays a valid process status (0-255) and is not mistaken for a
#: signal (128+n) (count; common practice).
MAX_EXIT_FAILURES: int = 100

#: Seconds between plain progress log lines when the output is not a terminal (s).
PROGRESS_LOG_INTERVAL_S: float = 10.0

#: How often a local worker process checks that the run that started it still lives (s);
#: after a ``kill -9`` of the run its workers exit within about this long instead of
#: waiting forever for work (common practice: a watchdog poll of the parent pid).
WORKER_PARENT_POLL_S: float = 1.0

#: Pattern a subject id or structure name must match: it becomes part of a file name
#: (``coefficients/<subject>_<structure>.npz``), so no path separators or blanks.
SAFE_NAME_PATTERN: str = r"^[A-Za-z0-9][A-Za-z0-9._+-]*$"

# --------------------------------------------------------------------------- stats
#: Default number of permutations for permutation tests.
DEFAULT_PERMUTATIONS: int = 5000

#: Smallest number of subjects a group may have in a comparison (subjects). Below three
#: a group's variance rests on one degree of freedom (common practice).
MIN_GROUP_SIZE: int = 3

#: Relative singular-value threshold under which a design matrix (columns scaled to unit
#: length) counts as rank deficient, i.e. its covariates as collinear (dimensionless;
#: common practice, about 1e4 times float64 machine epsilon).
COLLINEARITY_TOLERANCE: float = 1e-12

#: Memory budget for one block of permutations in the vectorised permutation engine
#: (bytes); blocks of permutations are sized to stay under it.
PERMUTATION_BLOCK_BYTES: int = 64 * 1024**2

#: Relative tolerance under which a permuted statistic counts as equal to the observed
#: one when counting exceedances (dimensionless). The identity permutation reproduces the
#: observed statistic only to rounding; scipy.stats.permutation_test uses the same idea.
PERMUTATION_TIE_RTOL: float = 1e-12

#: Family-wise / false-discovery level used to flag results (probability).
DEFAULT_ALPHA: float = 0.05

#: Bootstrap resamples for effect-size confidence intervals (Efron & Tibshirani,
#: An Introduction to the Bootstrap, 1993, ch. 13: 1,000-2,000 for percentile intervals).
DEFAULT_BOOTSTRAP: int = 2000

#: Coverage of effect-size confidence intervals (probability).
DEFAULT_CONFIDENCE: float = 0.95

#: ComBat empirical-Bayes iteration: stop when the largest relative change of the site
#: location and scale estimates falls below this (dimensionless). Johnson, Li & Rabinovic,
#: Biostatistics 2007, doi:10.1093/biostatistics/kxj037 (their reference code uses 1e-4).
COMBAT_CONVERGENCE: float = 1e-4

#: ComBat empirical-Bayes iteration cap (iterations); convergence takes tens.
COMBAT_MAX_ITERATIONS: int = 1000

#: Cross-validation folds for group classification (folds; common practice).
DEFAULT_CV_FOLDS: int = 5

#: Label permutations for the classification AUC permutation p-value (permutations);
#: each costs one full cross-validation (5 classifier fits), hence far fewer than the
#: GLM default: 200 resolve p down to 1/201 = 0.005, enough for a separability measure
#: (Ojala & Garriga, JMLR 2010, use 1,000; pass more with --classification-permutations).
DEFAULT_CLASSIFICATION_PERMUTATIONS: int = 200

#: Inverse regularisation strength of the logistic-regression classifier on standardised
#: descriptors (dimensionless; scikit-learn's default).
CLASSIFIER_C: float = 1.0

#: Shape-space modes reported by PCA (modes) and the spread of the mode surfaces
#: (standard deviations along each mode; common practice).
DEFAULT_PCA_MODES: int = 5
PCA_MODE_SD: float = 2.0

#: Degrees tested by ``shapedesc compare`` when none are given: 2 .. DEFAULT_DEGREE
#: (degree 0 is position, degree 1 the ellipsoid that fixes pose and scale).
DEFAULT_FIRST_TEST_DEGREE: int = 2
