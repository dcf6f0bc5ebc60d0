"""Every flat family E1-E17: free action, group closure, completeness of the element search,
volumes, orientability, circle pairs and bad input.

Sources: Wolf (1967) "Spaces of constant curvature" (the groups G1-G6, B1-B4 and their
free action); Conway & Rossetti (2003) "Describing the platycosms" (homology of the
platycosms, from memory); Cornish, Spergel & Starkman (1998) (circle radii, matched-circle
orientation); Riazuelo et al. (2004) (observer dependence of circles in twisted flat spaces).
"""

import itertools
import math

import numpy as np
import pytest

from topology import geometry as geo
from topology.circles import circle_points, predict_circles
from topology.errors import InputError
from topology.spaces import build_space

FAMILIES = {
    "E1": {"lengths": [1.3, 1.1, 1.5], "angles": [80.0, 100.0, 70.0]},
    "E2": {"lengths": [1.2, 1.4, 0.7], "angle": 75.0},
    "E3": {"lengths": [1.2, 0.45]},
    "E4": {"lengths": [1.3, 0.6]},
    "E5": {"lengths": [1.3, 0.3]},
    "E6": {"lengths": [0.7, 0.8, 0.9]},
    "E7": {"lengths": [1.1, 1.3, 0.7], "tilt": 70.0},
    "E8": {"lengths": [1.2, 1.2, 0.6], "angle": 80.0, "tilt": 110.0},
    "E9": {"lengths": [1.4, 1.2, 0.6]},
    "E10": {"lengths": [1.4, 1.2, 0.6]},
    "E11": {"lengths": [1.2, 1.5], "angle": 65.0},
    "E12": {"lengths": [1.3, 0.6]},
    "E13": {"lengths": [1.2, 0.7], "tilt": 60.0},
    "E14": {"lengths": [1.2, 0.7]},
    "E15": {"lengths": [1.5, 0.7]},
    "E16": {"lengths": [1.4]},
    "E17": {"lengths": [0.6]},
}
NAMES = list(FAMILIES)
NON_ORIENTABLE = {"E7", "E8", "E9", "E10", "E13", "E14", "E15", "E17"}
# order of the point group (number of cosets of the translation lattice), Wolf 1967
POINT_GROUP_ORDER = {"E1": 1, "E2": 2, "E3": 4, "E4": 3, "E5": 6, "E6": 4, "E7": 2, "E8": 2,
                     "E9": 4, "E10": 4, "E11": 1, "E12": 2, "E13": 2, "E14": 2, "E15": 4,
                     "E16": 1, "E17": 2}


def space_of(name):
    return build_space({"family": name, **FAMILIES[name]})


def observers(seed, n, box=1.5):
    rng = np.random.default_rng(seed)
    for _ in range(n):
        pos = rng.uniform(-box, box, 3)
        rot = geo.euler_zyz(*rng.uniform(0.0, 2.0 * np.pi, 3))
        yield geo.Observer.make("flat", pos, rot)


def fixed_projector(R):
    """Orthogonal projector onto the fixed space {v : R v = v} of a 3x3 orthogonal R."""
    _, s, vt = np.linalg.svd(R - np.eye(3))
    basis = vt[s < 1e-9]
    return basis.T @ basis


def membership(space, M, tol=1e-8):
    """True when the affine 4x4 M is T(lambda) g_k for a lattice vector lambda and a coset rep g_k.

    Written independently of FlatSpace.elements_within: match the linear part, then solve
    for integer lattice coordinates of the translation difference.
    """
    R, t = M[:3, :3], M[:3, 3]
    for Rk, tk in space.cosets:
        if np.abs(R - Rk).max() > tol:
            continue
        diff = t - tk
        n, *_ = np.linalg.lstsq(space.lattice.T, diff, rcond=None)
        if np.abs(n - np.round(n)).max() < 1e-6 and np.abs(np.round(n) @ space.lattice - diff).max() < 1e-6:
            return True
    return False


def brute_elements(space, x, radius, n_max):
    """All (R, t + lambda) with |R x + t + lambda - x| < radius, lattice indices in [-n_max, n_max]."""
    k = space.lattice.shape[0]
    grid = np.array(list(itertools.product(range(-n_max, n_max + 1), repeat=k)), dtype=float)
    lam = grid @ space.lattice
    found = []
    for R, t in space.cosets:
        d = np.linalg.norm(R @ x + t + lam - x, axis=1)
        for v in lam[(d < radius) & (d > 1e-12)]:
            found.append((R, t + v))
    return found


# ---------------------------------------------------------------------------------------------
# (a) free action
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", NAMES)
def test_group_acts_freely(name):
    # check: Wolf 1967 Lemma 3.1.x / common practice: x -> R x + t has no fixed point iff the
    # part of t along the fixed space of R is non-zero; then |g x - x| >= |P_fix t| for all x.
    space = space_of(name)
    for R, t in space.cosets:
        if np.allclose(R, np.eye(3)):
            continue
        P = fixed_projector(R)
        assert np.trace(P) >= 1 - 1e-9  # every non-trivial R here keeps an axis or a plane
        k = space.lattice.shape[0]
        grid = np.array(list(itertools.product(range(-4, 5), repeat=k)), dtype=float)
        along = (t + grid @ space.lattice) @ P
        assert np.linalg.norm(along, axis=1).min() > 0.05
    n_elements = 0
    for obs in observers(11, 25):
        hol = space.elements_within(obs, 2.0)
        n_elements += len(hol)
        for M, d in zip(hol.matrices, hol.displacement):
            P = fixed_projector(M[:3, :3])
            floor = np.linalg.norm(P @ M[:3, 3])
            assert floor > 0.05
            assert d >= floor - 1e-12
            assert d == pytest.approx(np.linalg.norm(M @ obs.point - obs.point))
    assert n_elements > 25


# ---------------------------------------------------------------------------------------------
# (b) closure and completeness of the element search
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", NAMES)
def test_products_and_inverses_stay_in_the_group(name):
    # check: common practice: Gamma = lattice x coset representatives is a group (Wolf 1967,
    # Bieberbach's description of a crystallographic group); products and inverses of the
    # elements found must again be lattice translates of a coset representative.
    space = space_of(name)
    obs = next(observers(5, 1, box=0.4))
    mats = space.elements_within(obs, 3.0).matrices[:30]
    assert len(mats) >= 4
    for M in mats:
        assert membership(space, M)
        assert membership(space, np.linalg.inv(M))
    for A, B in itertools.product(mats, mats):
        assert membership(space, A @ B)
    # a non-element is rejected (the test's membership check can fail)
    bogus = mats[0].copy()
    bogus[:3, 3] += 0.37 * space.lattice[0]
    assert not membership(space, bogus)


@pytest.mark.parametrize("name", NAMES)
def test_element_search_is_complete(name):
    # check: brute force over lattice indices (independent of the dual-basis index box)
    space = space_of(name)
    for obs in observers(23, 3):
        x = obs.point[:3]
        radius = 2.0
        want = brute_elements(space, x, radius, n_max=9)
        got = space.elements_within(obs, radius)
        d_want = np.sort([np.linalg.norm(R @ x + t - x) for R, t in want])
        assert abs(d_want - radius).min() > 1e-6  # no element on the boundary of the search
        assert len(got) == len(want)
        assert np.allclose(got.displacement, d_want)
        assert all(membership(space, M) for M in got.matrices)


# ---------------------------------------------------------------------------------------------
# (c) volumes, (d) orientability
# ---------------------------------------------------------------------------------------------
def expected_volume(name, p):
    """Volumes from the parametrisation (fundamental-domain formulas, common practice)."""
    L = p["lengths"]
    rad = np.radians
    if name == "E1":
        ca, cb, cg = np.cos(rad(p["angles"]))
        return L[0] * L[1] * L[2] * math.sqrt(1 - ca**2 - cb**2 - cg**2 + 2 * ca * cb * cg)
    if name == "E2":
        return L[0] * L[1] * np.sin(rad(p["angle"])) * L[2]
    if name == "E3":
        return L[0] ** 2 * L[1]
    if name in ("E4", "E5"):
        return math.sqrt(3) / 2 * L[0] ** 2 * L[1]  # hexagonal plane cell
    if name == "E6":
        return 2 * L[0] * L[1] * L[2]  # box 2Lx x 2Ly x 2Lz, four cosets
    if name == "E7":
        return L[0] * L[1] * np.sin(rad(p["tilt"])) * L[2]
    if name == "E8":
        return L[0] ** 2 * np.sin(rad(p["angle"])) * np.sin(rad(p["tilt"])) * L[2]
    if name in ("E9", "E10"):
        return L[0] * L[1] * L[2] / 2
    return math.inf


@pytest.mark.parametrize("name", NAMES)
def test_volume_and_point_group_order(name):
    # check: Wolf 1967: point groups of order 1, 2, 4, 3, 6, 4 (E1-E6), 2, 2, 4, 4 (B1-B4);
    # volume = covering-cell volume / point-group order, the cell written out by hand below.
    space = space_of(name)
    assert len(space.cosets) == POINT_GROUP_ORDER[name]
    assert space.compact == (int(name[1:]) <= 10)
    assert space.volume == pytest.approx(expected_volume(name, FAMILIES[name]), rel=1e-12)


@pytest.mark.parametrize("name", [n for n in NAMES if int(n[1:]) <= 10])
def test_volume_from_counting_images(name):
    # check: common practice: the images of a point in a ball of radius r number about
    # (4/3) pi r^3 / V; independent of the volume formula.
    space = space_of(name)
    r = 7.0
    counts = [len(space.elements_within(obs, r)) + 1 for obs in observers(3, 4)]
    estimate = 4.0 / 3.0 * np.pi * r**3 / np.mean(counts)
    assert estimate == pytest.approx(expected_volume(name, FAMILIES[name]), rel=0.02)


@pytest.mark.parametrize("name", NAMES)
def test_orientable_flag_matches_determinants(name):
    # check: common practice: a flat space is orientable iff every holonomy has det R = +1
    space = space_of(name)
    dets = [np.linalg.det(R) for R, _ in space.cosets]
    assert np.allclose(np.abs(dets), 1.0)
    assert space.orientable == all(d > 0 for d in dets)
    assert space.orientable == (name not in NON_ORIENTABLE)


# ---------------------------------------------------------------------------------------------
# the four non-orientable compact families are Wolf's B1-B4 (distinct groups)
# ---------------------------------------------------------------------------------------------
def smith_invariants(rel):
    """Invariant factors of an integer relation matrix (rows: relations, columns: generators)."""
    A = [list(map(int, row)) for row in rel]
    m, n = len(A), len(A[0])
    diag = []
    r = 0
    for c in range(n):
        # bring the smallest non-zero entry of the sub-matrix to (r, c), then clear row and column
        while True:
            entries = [(abs(A[i][j]), i, j) for i in range(r, m) for j in range(c, n) if A[i][j]]
            if not entries:
                return diag, n - len(diag)
            _, i, j = min(entries)
            A[r], A[i] = A[i], A[r]
            for row in A:
                row[c], row[j] = row[j], row[c]
            done = True
            for i in range(r + 1, m):
                q = A[i][c] // A[r][c]
                A[i] = [a - q * b for a, b in zip(A[i], A[r])]
                done &= A[i][c] == 0
            for j in range(c + 1, n):
                q = A[r][j] // A[r][c]
                for row in A:
                    row[j] -= q * row[c]
                done &= A[r][j] == 0
            if done and all(A[i][j] % A[r][c] == 0 for i in range(r + 1, m) for j in range(c + 1, n)):
                break
            if done:  # divisibility fix: add a row with a non-multiple entry
                i = next(i for i in range(r + 1, m) if any(A[i][j] % A[r][c] for j in range(c + 1, n)))
                A[r] = [a + b for a, b in zip(A[r], A[i])]
        diag.append(abs(A[r][c]))
        r += 1
        if r == m:
            return diag, n - len(diag)
    return diag, n - len(diag)


def homology(rel):
    diag, free = smith_invariants(rel)
    return free + sum(1 for d in diag if d == 0), sorted(d for d in diag if d > 1)


def T(v):
    m = np.eye(4)
    m[:3, 3] = v
    return m


def aff(R, t):
    m = np.eye(4)
    m[:3, :3] = R
    m[:3, 3] = t
    return m


def same(A, B):
    return np.abs(A - B).max() < 1e-9


def test_homology_of_the_klein_spaces():
    # check: Conway & Rossetti 2003 (from memory): H_1 of the first amphicosm Z^2 + Z_2, second
    # amphicosm Z^2, first amphidicosm Z + Z_2 + Z_2, second amphidicosm Z + Z_4. Each group is
    # presented as lattice generators plus lifts of the point group; the relations are verified
    # on the matrices of the space, then abelianised (Smith normal form).
    inv = np.linalg.inv
    # E7: generators g (glide), a = lattice[0], b = lattice[1]; g^2 = lattice[2]
    s = space_of("E7")
    g = aff(*s.cosets[1])
    a, b, c = (T(v) for v in s.lattice)
    assert same(g @ g, c)
    assert same(g @ a @ inv(g), inv(a)) and same(g @ b @ inv(g), b)
    # abelianised relations over (g, a, b): g a g^-1 a = 1 -> 2a; [g, b] -> 0; [a, b] -> 0
    assert homology([[0, 2, 0], [0, 0, 0]]) == (2, [2])
    # E8: g swaps the two plane translations
    s = space_of("E8")
    g = aff(*s.cosets[1])
    a1, a2, c = (T(v) for v in s.lattice)
    assert same(g @ g, c)
    assert same(g @ a1 @ inv(g), a2) and same(g @ a2 @ inv(g), a1)
    assert homology([[0, 1, -1], [0, -1, 1]]) == (2, [])
    # E9, E10: generators (A, B, x, y, z); the relation AB (BA)^-1 = x^-1 y^k distinguishes them
    for name, k, want in (("E9", 0, (1, [2, 2])), ("E10", 1, (1, [4]))):
        s = space_of(name)
        A, B = aff(*s.cosets[1]), aff(*s.cosets[2])
        x, y, z = (T(v) for v in s.lattice)
        assert same(A @ A, z @ np.linalg.matrix_power(y, k))
        assert same(B @ B, x)
        assert same(A @ x @ inv(A), inv(x)) and same(A @ y @ inv(A), y) and same(A @ z @ inv(A), z)
        assert same(B @ x @ inv(B), x) and same(B @ y @ inv(B), inv(y)) and same(B @ z @ inv(B), z)
        assert same(A @ B @ inv(B @ A), inv(x) @ np.linalg.matrix_power(y, k))
        rel = [
            [2, 0, 0, -k, -1],  # A^2 = z y^k
            [0, 2, -1, 0, 0],  # B^2 = x
            [0, 0, 2, 0, 0],  # A x A^-1 = x^-1
            [0, 0, 0, 2, 0],  # B y B^-1 = y^-1
            [0, 0, 1, -k, 0],  # AB(BA)^-1 = x^-1 y^k
        ]
        assert homology(rel) == want
        # the cosets are exactly {1, A, B, AB} modulo the lattice
        assert membership(s, A @ B) and not membership(s, A @ B @ T(s.lattice[0] / 2))


# ---------------------------------------------------------------------------------------------
# (e) circle pairs
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", NAMES)
def test_circle_pairs_satisfy_the_contract(name):
    # The contract T_A(phi) = T_B(s phi + tau): points of A mapped by g^-1 land on B at s phi + tau.
    # check: Cornish, Spergel & Starkman 1998: cos(alpha) = d / (2 chi); circles of an
    # orientation-reversing holonomy run the same way round, those of translations (and of
    # every orientation-preserving motion) the opposite way.
    space = space_of(name)
    phi = np.linspace(0, 2 * np.pi, 29)
    n_same = 0
    for obs in observers(31, 3, box=0.45):
        pairs = predict_circles(space, obs, 1.0)
        assert pairs
        for p in pairs:
            assert np.cos(p.radius) == pytest.approx(p.clone_distance / 2.0)
            P = obs.exp(circle_points(p.center_a, p.radius, phi), 1.0)
            Q = P @ np.linalg.inv(p.element).T
            nB, dist = obs.log(Q)
            assert dist == pytest.approx(np.ones_like(dist))
            want = circle_points(p.center_b, p.radius, p.orientation * phi + p.twist)
            assert np.abs(nB - want).max() < 1e-9
            det = np.linalg.det(p.element[:3, :3])
            assert p.orientation == (1 if det < 0 else -1)
            if np.allclose(p.element[:3, :3], np.eye(3)):
                assert p.orientation == -1
            n_same += p.orientation == 1
    assert (n_same > 0) == (name in NON_ORIENTABLE)


def test_general_torus_pairs_match_lattice_count():
    # check: Cornish, Spergel & Starkman 1998: one pair per lattice vector +-v with |v| < 2 chi_rec,
    # alpha = arccos(|v| / 2); counted here by brute force over lattice indices.
    p = {"lengths": [0.9, 1.15, 1.3], "angles": [72.0, 104.0, 61.0]}
    space = build_space({"family": "E1", **p})
    a, b, c = p["lengths"]
    al, be, ga = np.radians(p["angles"])
    G = np.array([[a * a, a * b * np.cos(ga), a * c * np.cos(be)],
                  [a * b * np.cos(ga), b * b, b * c * np.cos(al)],
                  [a * c * np.cos(be), b * c * np.cos(al), c * c]])  # Gram matrix of the cell
    n = np.array(list(itertools.product(range(-12, 13), repeat=3)), dtype=float)
    norms = np.sqrt(np.einsum("ij,jk,ik->i", n, G, n))
    short = np.sort(norms[(norms > 1e-9) & (norms < 2.0)])[::2]  # one of each +-v
    obs = geo.Observer.make("flat", [0.3, -0.7, 0.2], geo.euler_zyz(0.5, 0.9, 1.7))
    pairs = predict_circles(space, obs, 1.0)
    assert len(pairs) == len(short) > 6
    assert np.allclose(np.sort([pp.clone_distance for pp in pairs]), short)
    assert np.allclose(np.sort([np.cos(pp.radius) for pp in pairs]), short / 2)


# ---------------------------------------------------------------------------------------------
# (g) inhomogeneity
# ---------------------------------------------------------------------------------------------
def radii(space, pos):
    obs = geo.Observer.make("flat", pos)
    return np.sort([p.radius for p in predict_circles(space, obs, 1.0)])


def test_twisted_space_circles_depend_on_observer_torus_does_not():
    # check: Riazuelo et al. 2004: in E2 the pattern of circles depends on the observer's distance
    # from the screw axes; in the torus E1 it does not (homogeneous space, common practice).
    e2 = build_space({"family": "E2", "lengths": [1.5, 1.7, 0.8]})
    r_axis, r_off = radii(e2, [0.0, 0.0, 0.0]), radii(e2, [0.45, 0.3, 0.1])
    assert len(r_axis) != len(r_off) or np.abs(r_axis - r_off).max() > 1e-3
    # on a screw axis the half-turn moves the observer by L3 only: alpha = arccos(0.8 / 2)
    assert r_axis.max() == pytest.approx(np.arccos(0.4))
    e1 = build_space({"family": "E1", **FAMILIES["E1"]})
    ref = radii(e1, [0.0, 0.0, 0.0])
    for pos in ([0.45, 0.3, 0.1], [-1.2, 0.8, 2.5]):
        assert np.allclose(radii(e1, pos), ref)
    assert not e2.homogeneous and e1.homogeneous


# ---------------------------------------------------------------------------------------------
# (h) bad parameters
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("spec, key", [
    ({"family": "E3", "lengths": [1.0, 1.1, 0.5]}, "lengths"),  # square plane lattice
    ({"family": "E4", "lengths": [1.0, 1.2, 0.5]}, "lengths"),
    ({"family": "E5", "lengths": [0.9, 1.0, 0.5]}, "lengths"),
    ({"family": "E8", "lengths": [1.0, 1.3, 0.5]}, "lengths"),  # the mirror swaps the plane vectors
    ({"family": "E7", "lengths": [1.0, 0.5]}, "lengths"),
    ({"family": "E12", "lengths": [1.0, 1.0, 0.5]}, "lengths"),
    ({"family": "E17", "lengths": [-0.5]}, "lengths"),
    ({"family": "E9", "lengths": [1.0, "a", 0.5]}, "lengths"),
    ({"family": "E10"}, "lengths"),
    ({"family": "E8", "lengths": [1.0, 0.5], "angle": 180.0}, "angle"),
    ({"family": "E2", "lengths": [1.0, 1.0, 0.5], "angle": "wide"}, "angle"),
    ({"family": "E7", "lengths": [1.0, 1.0, 0.5], "tilt": 0.0}, "tilt"),
    ({"family": "E13", "lengths": [1.0, 0.5], "tilt": 180.0}, "tilt"),
    ({"family": "E3", "lengths": [1.0, 0.5], "angle": 60.0}, "angle"),  # not a key of E3
    ({"family": "E9", "lengths": [1.0, 1.0, 0.5], "tilt": 80.0}, "tilt"),  # not a key of E9
    ({"family": "E1", "lengths": [1.0, 1.0, 1.0], "angles": [90.0, 90.0]}, "angles"),
    ({"family": "E1", "lengths": [1.0, 1.0, 1.0], "angles": [10.0, 10.0, 170.0]}, "angles"),
])
def test_bad_parameters_raise_input_error(spec, key):
    with pytest.raises(InputError) as err:
        build_space(spec)
    assert key in str(err.value)
