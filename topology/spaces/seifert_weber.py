"""The Seifert-Weber dodecahedral space, built from its published geometry.

Weber & Seifert (1933, "Die beiden Dodekaederraeume", Math. Z. 37, 237) glue each face of a
dodecahedron to the opposite face after a rotation by 3/10 of a turn. With the regular
hyperbolic dodecahedron of dihedral angle 2 pi/5 (72 deg; the cell of the regular honeycomb
{5,3,5}, Coxeter 1954, "Regular honeycombs in hyperbolic space") the five dihedral angles around
each edge class add up to 2 pi and the gluing is a closed hyperbolic manifold (Poincare's
polyhedron theorem).

Construction (all in the hyperboloid model, centre of the dodecahedron at (1, 0, 0, 0)):

* face directions n: the 12 vertices of the icosahedron, (0, +-1, +-phi) and cyclic
  permutations, normalised; adjacent faces make the angle delta with cos(delta) = 1/sqrt(5);
* face distance f (inradius, centre to face centre): in the right triangle (centre, face centre,
  edge midpoint) the angle at the centre is delta/2 and the angle at the edge midpoint is half
  the dihedral angle, so (hyperbolic right triangle, cos A = cosh a sin B; e.g. Ratcliffe,
  "Foundations of hyperbolic manifolds", sec. 3.5)

      cosh f = cos(pi/5) / sin(delta/2);

* face plane of direction n: points X with <X, N> = 0, N = (sinh f, cosh f n) (outward unit
  normal); vertices are where three mutually adjacent planes meet;
* face pairing g_n = B(2 f, n) R_n(3 pi/5): a right-handed rotation by 3/10 turn about the axis
  n, then the boost by 2 f along n. It maps the face of direction -n onto the face of direction
  n (opposite faces of a dodecahedron are offset by 1/10 turn, and 1/10 + 3/10 is a whole number
  of fifths), and the dodecahedron onto its neighbour across that face. g_{-n} = g_n^-1, so six
  generators suffice.

:func:`build` returns the generator file contents; ``python -m topology.spaces.seifert_weber``
rewrites ``topology/data/seifert_weber.json``. The volume is integrated numerically in the
Klein model (volume element (1 - |k|^2)^-2 d^3k); the injectivity radius is half the length of
the shortest closed geodesic, found by enumerating every element with d(O, g O) <= 2 R_P + l*
(any closed geodesic has a lift whose axis crosses the dodecahedron, within R_P of its centre,
which bounds d(O, g O) through the displacement formula quoted in :func:`systole`).
"""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np

from .. import geometry as geo
from .hyperbolic import enumerate_words, translation_length

GOLDEN = (1.0 + math.sqrt(5.0)) / 2.0
DIHEDRAL = 2.0 * math.pi / 5.0  # 72 deg
TWIST = 3.0 * 2.0 * math.pi / 10.0  # 3/10 of a turn
DATA_FILE = Path(__file__).resolve().parent.parent / "data" / "seifert_weber.json"


def face_directions() -> np.ndarray:
    """The 12 unit vectors to the icosahedron's vertices, ordered so that row i + 6 = -row i."""
    base = []
    for s1, s2 in itertools.product((1.0, -1.0), repeat=2):
        v = np.array([0.0, s1, s2 * GOLDEN])
        base += [v, np.roll(v, 1), np.roll(v, 2)]
    base = np.array(base) / math.sqrt(1.0 + GOLDEN**2)
    first = [v for v in base if (v[np.flatnonzero(np.abs(v) > 1e-12)[0]] > 0)]
    first = np.array(first)
    return np.vstack([first, -first])


def adjacent_angle() -> float:
    """Angle delta between the directions of adjacent faces: cos(delta) = 1/sqrt(5)."""
    n = face_directions()
    c = n @ n.T
    return float(np.arccos(np.max(c[~np.eye(12, dtype=bool)])))


def face_distance(dihedral: float = DIHEDRAL) -> float:
    """Inradius f of the regular hyperbolic dodecahedron: cosh f = cos(dihedral/2) / sin(delta/2)."""
    return float(np.arccosh(math.cos(dihedral / 2.0) / math.sin(adjacent_angle() / 2.0)))


def face_normals(f: float) -> np.ndarray:
    """Outward unit (spacelike) normals N = (sinh f, cosh f n) of the 12 face planes, (12, 4)."""
    n = face_directions()
    return np.hstack([np.full((12, 1), math.sinh(f)), math.cosh(f) * n])


def face_centers(f: float) -> np.ndarray:
    n = face_directions()
    return np.hstack([np.full((12, 1), math.cosh(f)), math.sinh(f) * n])


def adjacency() -> np.ndarray:
    """(12, 12) boolean: faces sharing an edge (their directions at angle delta)."""
    n = face_directions()
    c = n @ n.T
    return np.abs(c - 1.0 / math.sqrt(5.0)) < 1e-9


def vertices(f: float) -> tuple[np.ndarray, list[tuple[int, int, int]]]:
    """The 20 vertices (hyperboloid points, (20, 4)) and the three faces meeting at each."""
    adj = adjacency()
    J = geo.MINKOWSKI
    N = face_normals(f)
    pts, triples = [], []
    for i, j, k in itertools.combinations(range(12), 3):
        if adj[i, j] and adj[j, k] and adj[i, k]:
            A = N[[i, j, k]] @ J  # rows: X -> <X, N>
            x = np.linalg.svd(A)[2][-1]
            x = x if x[0] > 0 else -x
            q = -x[0] ** 2 + x[1:] @ x[1:]
            if q >= 0:
                raise AssertionError("dodecahedron vertex is not a point of H^3")
            pts.append(x / math.sqrt(-q))
            triples.append((i, j, k))
    return np.array(pts), triples


def rotation4(axis: np.ndarray, angle: float) -> np.ndarray:
    m = np.eye(4)
    m[1:, 1:] = geo.rotation_about(axis, angle)
    return m


def boost4(axis: np.ndarray, s: float) -> np.ndarray:
    """Boost by distance s along the unit 3-vector axis."""
    n = np.asarray(axis, dtype=float)
    m = np.eye(4)
    m[0, 0] = math.cosh(s)
    m[0, 1:] = m[1:, 0] = math.sinh(s) * n
    m[1:, 1:] += (math.cosh(s) - 1.0) * np.outer(n, n)
    return m


def face_pairings(f: float | None = None, twist: float = TWIST) -> np.ndarray:
    """g_n = B(2 f, n) R_n(twist) for all 12 faces n (row i + 6 is the inverse of row i)."""
    f = face_distance() if f is None else f
    return np.array([boost4(n, 2.0 * f) @ rotation4(n, twist) for n in face_directions()])


def edges(f: float) -> list[tuple[int, int]]:
    """The 30 edges as pairs of adjacent faces (i < j)."""
    adj = adjacency()
    return [(i, j) for i, j in itertools.combinations(range(12), 2) if adj[i, j]]


def _edge_vertices(f: float) -> dict:
    pts, triples = vertices(f)
    out = {}
    for (i, j) in edges(f):
        out[(i, j)] = pts[[t for t, tr in enumerate(triples) if i in tr and j in tr]]
    return out


def edge_cycles(f: float | None = None, twist: float = TWIST) -> list[tuple[list[tuple[int, int]], np.ndarray]]:
    """Edge cycles of the gluing (Poincare's polyhedron theorem; common practice).

    Start at an edge e in face i; the pairing h_i = g_{-n_i} carries face i to the opposite face
    and e to an edge e' there; continue through the other face of e' until (e, i) recurs. Returns
    each cycle as its list of edges and the cycle transformation (the product of the pairings,
    which must be the identity when the dihedral angles add up to 2 pi).
    """
    f = face_distance() if f is None else f
    g = face_pairings(f, twist)
    ev = _edge_vertices(f)
    opp = lambda i: (i + 6) % 12  # noqa: E731
    done, cycles = set(), []
    for e0 in ev:
        for i0 in e0:
            if (e0, i0) in done:
                continue
            e, i, prod, path = e0, i0, np.eye(4), []
            while True:
                done.add((e, i))
                path.append(e)
                h = g[opp(i)]  # maps face i onto face opp(i)
                img = ev[e] @ h.T
                target = [e2 for e2 in ev if opp(i) in e2 and
                          min(np.abs(img - ev[e2]).max(), np.abs(img[::-1] - ev[e2]).max()) < 1e-8]
                if len(target) != 1:
                    raise AssertionError("face pairing does not map an edge onto an edge")
                e = target[0]
                prod = h @ prod
                i = e[0] if e[1] == opp(i) else e[1]
                if (e, i) == (e0, i0):
                    break
                if len(path) > 30:
                    raise AssertionError("edge cycle does not close")
            cycles.append((path, prod))
    # each cycle is met once from each of its faces' directions; keep one per edge set
    unique = {}
    for path, prod in cycles:
        unique.setdefault(frozenset(path), (path, prod))
    return list(unique.values())


def klein_volume(f: float | None = None, order: int = 40) -> float:
    """Volume of the dodecahedron by Gauss-Legendre quadrature in the Klein model.

    The dodecahedron is the cone from the centre over its 12 pentagons, each cut into 5
    triangles (face centre, two vertices): 60 tetrahedra, each mapped from the unit cube by
    p = s (A + t (B - A) + t w (C - B)) with Jacobian s^2 t |det(A, B - A, C - B)| (Duffy), and
    the hyperbolic volume element (1 - |p|^2)^-2 d^3p (common practice).
    """
    f = face_distance() if f is None else f
    pts, triples = vertices(f)
    klein_v = pts[:, 1:] / pts[:, :1]
    klein_f = face_centers(f)[:, 1:] / face_centers(f)[:, :1]
    x, w = np.polynomial.legendre.leggauss(order)
    x, w = 0.5 * (x + 1.0), 0.5 * w
    S, T, W = np.meshgrid(x, x, x, indexing="ij")
    WT = (w[:, None, None] * w[None, :, None] * w[None, None, :]) * S**2 * T
    total = 0.0
    for face in range(12):
        vids = [v for v, tr in enumerate(triples) if face in tr]
        # order the pentagon's vertices by angle about the face direction
        n = face_directions()[face]
        e1 = np.cross(n, [0.3, 0.5, 0.8])
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(n, e1)
        ang = [math.atan2(klein_v[v] @ e2, klein_v[v] @ e1) for v in vids]
        ring = [vids[k] for k in np.argsort(ang)]
        A = klein_f[face]
        for a, b in zip(ring, ring[1:] + ring[:1]):
            B, C = klein_v[a], klein_v[b]
            jac = abs(np.linalg.det(np.array([A, B - A, C - B])))
            P = (S[..., None] * (A + T[..., None] * (B - A) + (T * W)[..., None] * (C - B)))
            dens = (1.0 - np.sum(P**2, axis=-1)) ** -2
            total += jac * float(np.sum(WT * dens))
    return total


def systole(f: float | None = None) -> tuple[float, int]:
    """Length of the shortest closed geodesic and the number of group elements g with that
    translation length among those searched (see the module docstring)."""
    f = face_distance() if f is None else f
    gens = list(face_pairings(f)[:6])
    pts, _ = vertices(f)
    R = float(np.max(geo.distance("hyperbolic", geo.origin("hyperbolic")[None], pts)))
    o = geo.origin("hyperbolic")
    # first guess from the short words, then the complete search: a loxodromic g of
    # translation length l and twist theta moves a point at distance rho from its axis by d with
    # cosh d = cosh(l) cosh^2(rho) - cos(theta) sinh^2(rho) (common practice), and rho <= R
    near = enumerate_words(gens, o, 2.0 * f + 1.0 + R)
    guess = float(np.min(translation_length(near[1:])))
    limit = float(np.arccosh(math.cosh(guess) * math.cosh(R) ** 2 + math.sinh(R) ** 2))
    words = enumerate_words(gens, o, limit + R)
    d = geo.distance("hyperbolic", o[None], words @ o)
    words = words[(d <= limit) & (d > 1e-9)]
    ell = translation_length(words)
    best = float(ell.min())
    return best, int(np.sum(ell < best + 1e-9))


def build() -> dict:
    """Contents of the generator file of the Seifert-Weber space."""
    f = face_distance()
    g = face_pairings(f)
    pts, _ = vertices(f)
    R = float(np.max(geo.distance("hyperbolic", geo.origin("hyperbolic")[None], pts)))
    length, _ = systole(f)
    return {
        "name": "Seifert-Weber dodecahedral space",
        "source": ("Weber & Seifert 1933 (Math. Z. 37, 237): regular hyperbolic dodecahedron of "
                   "dihedral angle 72 deg (cell of the {5,3,5} honeycomb, Coxeter 1954), each face "
                   "glued to the opposite face after a 3/10 turn; generators g_n = B(2f, n) R_n(108 deg) "
                   "built by topology.spaces.seifert_weber"),
        "volume": round(klein_volume(f), 10),
        "inradius": f,
        "injectivity_radius": 0.5 * length,
        "injectivity_radius_at_center": f,
        "shortest_geodesic": length,
        "fundamental_polyhedron": {"center": [1.0, 0.0, 0.0, 0.0], "circumradius": R, "inradius": f},
        "generators": [m.tolist() for m in g[:6]],
    }


def write(path: str | Path = DATA_FILE) -> Path:
    path = Path(path)
    path.write_text(dumps(build()))
    return path


def dumps(data: dict) -> str:
    """JSON text with one matrix row per line (full float precision, round-trips exactly)."""
    head = {k: v for k, v in data.items() if k != "generators"}
    text = json.dumps(head, indent=1)[:-2]
    mats = ",\n".join("  [" + ",\n   ".join(json.dumps(row) for row in m) + "]" for m in data["generators"])
    return text + ',\n "generators": [\n' + mats + "\n ]\n}\n"


def _main() -> None:  # pragma: no cover - regeneration entry point
    write()


if __name__ == "__main__":  # pragma: no cover
    _main()
