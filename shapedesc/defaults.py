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

# --------------------------------------------------------------------------- mesh

# --------------------------------------------------------------------------- sphere

# --------------------------------------------------------------------------- descriptors
#: Nearest face centroids examined per query in point-to-mesh distances (count).
#: 16 makes the query exact on the near-uniform meshes used here (checked against a
#: brute-force search in tests/test_mesh_distance.py).
DISTANCE_CANDIDATE_FACES: int = 16

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
#: each costs one full cross-validation, hence fewer than the GLM default
#: (Ojala & Garriga, JMLR 2010, use 1,000).
DEFAULT_CLASSIFICATION_PERMUTATIONS: int = 1000

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

#: Icosphere subdivision level of the correspondence sphere for point-wise tests
#: (level 4: 2,562 vertices).
DEFAULT_VERTEX_LEVEL: int = 4
