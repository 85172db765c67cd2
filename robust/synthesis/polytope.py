"""Matrix polytopes that contain the reduced models of every vehicle in the box.

The reduced model ``x' = A(p) x + B(p) u`` depends on the parameters
rationally (through the inverse of the mass matrix), so the models at the
corners of the box do not span a polytope containing the models inside.
Two routes are offered, both returning vertices of a descriptor form
``E x' = A x + B u`` (``E = I`` for the first):

``sampled_hull``
    The convex hull of the ``(A, B)`` images of a dense grid over the box,
    in the affine subspace their varying entries span, inflated about its
    centroid by a stated margin; containment is then verified on an
    independent, denser Monte Carlo sample.  Practical, not a proof.
``moment_box``
    Keep the mass matrix: ``E``, ``A`` and ``B`` are affine in the mass
    moments ``(m, m h, m h^2)`` of chassis and payload, the inertias, the
    torque-constant ratio and the bearing friction.  A polytope in those
    moments that contains the image of the box (a tangent triangle bounds
    the parabola ``(h, h^2)``) maps to descriptor vertices that contain every
    model of the box.  Rigorous for ranges on chassis, payload, torque
    constant and friction.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.spatial import ConvexHull, QhullError

from robust.linear import reduced_model
from robust.uncertainty import Box, corners, grid
from robust.vehicle import get_parameter

ROUTES = ("sampled_hull", "moment_box")
MOMENT_NAMES = ("m11", "m22", "m33", "Ml", "k", "c_b")
MOMENT_UNITS = ("kg", "kg m^2", "kg m^2", "kg m", "-", "N m s/rad")
RIGOROUS_RANGES = ("chassis.", "payload.", "drive.", "wheel.bearing_friction_n_m_s_per_rad")


@dataclass(frozen=True)
class Polytope:
    """Vertices of a descriptor polytope ``E x' = A x + B u``.

    Attributes
    ----------
    route
        ``"sampled_hull"`` or ``"moment_box"``.
    E, A, B
        Vertex matrices, shapes ``(m, 4, 4)``, ``(m, 4, 4)``, ``(m, 4, 2)``.
    guarantee
        Plain statement of what containment holds.
    facts
        Route-specific facts (sample counts, inflation, containment check,
        moment intervals).
    """

    route: str
    E: np.ndarray
    A: np.ndarray
    B: np.ndarray
    guarantee: str
    facts: dict
    schedule: np.ndarray | None = None  # per vertex: measured scheduling value minus its nominal [unit of it]
    fixed: Polytope | None = None  # a scheduled polytope's vertices for a gain that ignores the measurement

    @property
    def vertices(self) -> int:
        return int(self.A.shape[0])

    @property
    def rigorous(self) -> bool:
        """True when containment of every model of the box is proved (not only checked on samples)."""
        return self.route == "moment_box"


def _entries(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    return np.concatenate([A.reshape(A.shape[0], -1), B.reshape(B.shape[0], -1)], axis=1)


GRID_BY_RANGES = {1: 41, 2: 13, 3: 7, 4: 3}


def _needed_scale(cc: np.ndarray, cmean: np.ndarray, normals: np.ndarray, rhs0: np.ndarray) -> np.ndarray:
    """Per point, the hull scale about ``cmean`` needed to contain it (chunked over points)."""
    out = np.empty(cc.shape[0])
    step = max(1, int(2e7 // max(normals.shape[0], 1)))
    for i in range(0, cc.shape[0], step):
        proj = (cc[i : i + step] - cmean) @ normals.T
        out[i : i + step] = (proj / rhs0[None, :]).max(axis=1)
    return out


def sampled_hull(
    box: Box,
    *,
    points_per_axis: int | None = None,
    margin: float = 0.01,
    check_samples: int = 5000,
    seed: int = 0,
) -> Polytope:
    """Inflated convex hull of the ``(A, B)`` images of a grid over the box.

    The hull is computed (qhull) in the affine subspace spanned by the varying
    entries of ``A`` and ``B``.  Its inflation about the centroid is sized so
    that a calibration Monte Carlo sample lies inside (plus ``margin``), and
    containment is then verified on a second, independent sample.

    Parameters
    ----------
    box
        Parameter box.
    points_per_axis
        Grid density for the hull (default by number of ranges: 41, 13, 7, 3, 2).
    margin
        Extra relative inflation beyond the calibrated one. [-]
    check_samples
        Size of each Monte Carlo sample (calibration and verification).
    seed
        Seed of the calibration sample; the verification sample uses ``seed + 1``.
    """
    if not box.ranges:
        m = reduced_model(box.plant(box.nominal[None, :]))
        return Polytope("sampled_hull", np.eye(4)[None], m.A, m.B, "single model (no ranges)", {"dimension": 0})
    ppa = points_per_axis or GRID_BY_RANGES.get(len(box.ranges), 2)
    pts = grid(box, ppa)
    m = reduced_model(box.plant(pts))
    z = _entries(m.A, m.B)
    centre = z.mean(axis=0)
    dz = z - centre
    scale = np.abs(dz).max(axis=0)
    varying = scale > 1e-12 * np.maximum(1.0, np.abs(centre))
    zs = dz[:, varying] / scale[varying]
    _u, s, vt = np.linalg.svd(zs, full_matrices=False)
    rank = int(np.sum(s > 1e-9 * s[0])) if s.size else 0
    basis = vt[:rank]
    coords = zs @ basis.T
    cmean = coords.mean(axis=0)

    b_seen = [m.B]

    def project(samples):
        mc = reduced_model(box.plant(samples))
        b_seen.append(mc.B)
        zc = (_entries(mc.A, mc.B) - centre)[:, varying] / scale[varying]
        cc = zc @ basis.T
        return cc, float(np.abs(zc - cc @ basis).max())

    if rank == 1:
        idx = np.array([np.argmin(coords[:, 0]), np.argmax(coords[:, 0])])
        normals = np.array([[1.0], [-1.0]])
        rhs0 = np.array([coords[idx[1], 0] - cmean[0], cmean[0] - coords[idx[0], 0]])
    else:
        try:
            hull = ConvexHull(coords, qhull_options="QJ")
        except QhullError as exc:  # pragma: no cover - degenerate data
            raise ValueError(f"could not build the hull of the sampled models: {exc}") from None
        idx = hull.vertices
        normals, offsets = hull.equations[:, :-1], hull.equations[:, -1]
        rhs0 = -offsets - normals @ cmean
    # the hull must contain the box itself, not only where the case's distributions put their mass:
    # calibrate and verify on uniform points over the box plus its corners and edge midpoints
    cal, _ = project(_box_points(box, check_samples, seed))
    needed = float(max(_needed_scale(cal, cmean, normals, rhs0).max() - 1.0, 0.0))
    inflation = needed + margin
    ver_pts = _box_points(box, check_samples, seed + 1)
    ver, off_subspace = project(ver_pts)
    need_ver = _needed_scale(ver, cmean, normals, rhs0)
    inside = float(np.mean(need_ver <= 1.0 + inflation))
    ncorner = 2 ** len(box.ranges)
    corners_inside = float(np.mean(need_ver[:ncorner] <= 1.0 + inflation))
    cverts = cmean + (1.0 + inflation) * (coords[idx] - cmean)
    zv = np.tile(centre, (len(idx), 1))
    zv[:, varying] += (cverts @ basis) * scale[varying]
    A = zv[:, :16].reshape(-1, 4, 4)
    B = zv[:, 16:].reshape(-1, 4, 2)
    _refuse_sign_flips(np.concatenate(b_seen), B, inflation, rank)
    facts = {
        "grid_points_per_axis": ppa,
        "grid_models": int(len(pts)),
        "varying_entries": int(varying.sum()),
        "subspace_dimension": rank,
        "calibrated_inflation": needed,
        "extra_margin": margin,
        "inflation": inflation,
        "check_samples": check_samples,
        "calibration_seed": seed,
        "verification_seed": seed + 1,
        "verification_points": "uniform over the box, its corners and its edge midpoints",
        "verification_inside_fraction": inside,
        "corners_inside_fraction": corners_inside,
        "verification_largest_scale_needed": float(need_ver.max()),
        "verification_off_subspace": off_subspace,
    }
    guarantee = (
        f"practical: the hull, inflated by {100 * inflation:.3g}%, contains {100 * inside:.4g}% of "
        f"{len(ver_pts)} independent models spread uniformly over the box (its corners and edge midpoints "
        "included; not a proof); with a common Lyapunov matrix the certificate holds for constant or "
        "time-varying parameters inside the hull"
    )
    return Polytope("sampled_hull", np.tile(np.eye(4), (len(idx), 1, 1)), A, B, guarantee, facts)


STATE_WORDS = ("forward speed", "yaw rate", "pitch angle", "pitch rate")


def _refuse_sign_flips(B_models: np.ndarray, B_vertices: np.ndarray, inflation: float, rank: int) -> None:
    """Refuse a hull whose vertices reverse a sign the input matrix keeps over every model seen.

    Where every model of the box pushes a state the same way with a wheel
    torque, a vertex that pushes it the other way (or not at all) is a model no
    gain can stabilise together with the real ones, so the LMIs would fail for a
    reason that has nothing to do with the vehicle.  Say so instead.
    """
    pos = np.all(B_models > 0, axis=0)
    neg = np.all(B_models < 0, axis=0)
    flips = (pos & np.any(B_vertices <= 0, axis=0)) | (neg & np.any(B_vertices >= 0, axis=0))
    if not flips.any():
        return
    names = sorted({STATE_WORDS[i] for i, _j in zip(*np.nonzero(flips))}, key=STATE_WORDS.index)
    where = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
    raise ValueError(
        f"the sampled hull cannot serve this box: to contain the models spread over the box it must be inflated by "
        f"{100 * inflation:.3g}% (their image is strongly curved in the {rank} directions it spans), and the inflated "
        f"hull then reaches models in which wheel torque acts on the {where} with the opposite sign to "
        "every real model; no gain can stabilise those. Use route 'moment_box' (rigorous; it takes ranges on chassis, "
        "payload, torque constant and friction), or narrow the ranges"
    )


def _box_points(box: Box, n: int, seed: int) -> np.ndarray:
    """The box's corners, its edge midpoints, then ``n`` uniform points (seeded)."""
    cpts = corners(box)
    mids = []
    for j in range(len(box.ranges)):
        m = cpts.copy()
        m[:, j] = 0.5 * (box.low[j] + box.high[j])
        mids.append(m)
    edge = np.unique(np.concatenate(mids), axis=0) if mids else np.zeros((0, len(box.ranges)))
    u = np.random.default_rng(seed).random((n, len(box.ranges)))
    return np.concatenate([cpts, edge, box.low + u * (box.high - box.low)])


MAX_RIGOROUS_RANGES = 9  # the product polytope doubles or triples per range; beyond this the LMIs get too large


def hull_vertices(points: np.ndarray, tol: float = 1e-9) -> np.ndarray:
    """The points of ``points`` ``(n, d)`` that are vertices of their convex hull.

    The hull is computed (qhull) in the affine subspace the points span, in
    coordinates normalised per column.  The reduction is kept only when every
    dropped point is verified inside the hull of the kept ones, to ``tol``
    relative to the spread of the points (checked on the kept points' own hull
    equations); otherwise all points are returned unchanged.
    """
    pts = np.asarray(points, dtype=float)
    if pts.shape[0] <= 2:
        return pts
    centre = pts.mean(axis=0)
    spread = np.abs(pts - centre).max(axis=0)
    keep_cols = spread > 0
    if not keep_cols.any():
        return pts[:1]
    z = (pts - centre)[:, keep_cols] / spread[keep_cols]
    _u, s, vt = np.linalg.svd(z, full_matrices=False)
    rank = int(np.sum(s > 1e-10 * s[0]))
    c = z @ vt[:rank].T
    if rank == 1:
        idx = np.unique([int(np.argmin(c[:, 0])), int(np.argmax(c[:, 0]))])
        return pts[idx]
    try:
        kept = np.sort(ConvexHull(c).vertices)
        eq = ConvexHull(c[kept]).equations
    except QhullError:  # pragma: no cover - degenerate data: keep everything
        return pts
    dropped = np.setdiff1d(np.arange(len(c)), kept)
    if dropped.size and float((c[dropped] @ eq[:, :-1].T + eq[:, -1]).max()) > tol:
        return pts
    return pts[kept]


def _interval(box: Box, name: str) -> tuple[float, float]:
    for r in box.ranges:
        if r.name == name:
            return r.low, r.high
    v = get_parameter(box.vehicle, name)
    return v, v


def _ranged(box: Box, name: str) -> bool:
    return any(r.name == name for r in box.ranges)


def _mass_height_vertices(m: tuple[float, float], h: tuple[float, float], *, with_height: bool = False) -> np.ndarray:
    """Vertices ``(m, m h, m h^2)`` of a polytope containing the image of a mass x height box.

    For a fixed mass the curve ``(h, h^2)`` lies in the triangle of its end
    points and the crossing of its end tangents, ``((h1 + h2) / 2, h1 h2)``
    (a parabola is convex); scaling by the mass is linear, so the images of
    both end masses span the whole image.
    """
    h1, h2 = h
    tri = [(h1, h1 * h1), (h2, h2 * h2)] if h1 != h2 else [(h1, h1 * h1)]
    if h1 != h2:
        tri.append((0.5 * (h1 + h2), h1 * h2))
    masses = sorted({m[0], m[1]})
    if with_height:  # the height itself as a fourth coordinate (a gain scheduled on it): (m, m u, m v, u)
        return np.array([(mm, mm * hh, mm * yy, hh) for mm in masses for hh, yy in tri])
    return np.array([(mm, mm * hh, mm * yy) for mm in masses for hh, yy in tri])


def moment_intervals(box: Box) -> dict[str, tuple[float, float]]:
    """Interval bounds of the moments ``q`` over the box (interval arithmetic), for reporting."""
    P = moment_box(box)
    return {n: tuple(P.facts["moment_intervals"][n]) for n in MOMENT_NAMES}


SCHEDULABLE = ("payload.mass_kg", "payload.cg_height_m")


def moment_box(box: Box, *, schedule=None) -> Polytope:
    """Rigorous descriptor polytope from the mass moments of chassis and payload.

    ``E``, ``A`` and ``B`` are affine in the moments ``(m, m h, m h^2)`` of the
    chassis and of the payload, the inertia terms, the torque-constant ratio
    and the bearing friction.  Each group gets a polytope that contains its
    image (mass x height: see :func:`_mass_height_vertices`; others:
    intervals), and the vertices of the product polytope are mapped to
    ``(E, A, B)``.

    With a ``schedule`` (:class:`robust.gains.Schedule` on the payload mass or its
    centre-of-mass height) the gain is ``K0 + d K1`` with ``d`` the measured value minus its nominal,
    the measurement off by at most the schedule's error.  The vertex LMIs then
    contain ``B K = k B0 (K0 + d K1)``: affine in ``(q, d, w)`` with ``w = k d``.
    The product polytope gets one more group (the measurement error, two values)
    and every vertex carries ``d`` (the payload mass of its vertex plus its error,
    minus the nominal) and ``w``; on the height, the payload group's vertices carry
    their height ``u`` as a fourth coordinate, ``(m, m u, m v, u)`` (multi-affine in
    the mass and the triangle's point, so the vertices' images contain every
    ``(m, m h, m h^2, h)``), and ``d`` is that height plus the error minus the
    nominal.  The points ``(q, d, w)`` of the product vertices contain every
    model's ``(q, d, k d)`` (for a fixed vertex of the other groups, ``(k, k d)``
    is linear in ``k``), and the reduction to hull vertices is done in
    ``(q, d, w)``, so a vertex LMI affine in those holds on the whole box.  The
    returned polytope's ``schedule`` holds ``d`` per vertex and ``fixed`` the
    polytope of a gain that ignores the measurement (the same vertices reduced in
    ``q`` alone, identical to ``moment_box(box)``).
    """
    if len(box.ranges) > MAX_RIGOROUS_RANGES:
        raise ValueError(
            f"the moment_box route takes at most {MAX_RIGOROUS_RANGES} ranged parameters (the vertex count grows "
            f"two- to threefold per range); this case has {len(box.ranges)}: fix the least influential ones "
            "(see the sensitivity command) or use route 'sampled_hull'"
        )
    bad = [r.name for r in box.ranges if not r.name.startswith(RIGOROUS_RANGES)]
    if bad:
        raise ValueError(
            f"the moment_box route cannot bound a range on {bad[0]!r} (wheel geometry and masses enter "
            "non-affinely); use route 'sampled_hull'"
        )
    v = box.vehicle
    iv = {r.name: (r.low, r.high) for r in box.ranges}

    def bounds(name):
        return iv.get(name, (get_parameter(v, name), get_parameter(v, name)))

    groups: list[np.ndarray] = []  # each: (vertices, columns) in the order of `cols`
    cols: list[str] = []
    on_height = schedule is not None and schedule.parameter == "payload.cg_height_m"
    for body in ("chassis", "payload"):
        h_col = on_height and body == "payload"
        groups.append(
            _mass_height_vertices(bounds(f"{body}.mass_kg"), bounds(f"{body}.cg_height_m"), with_height=h_col)
        )
        cols += [f"{body}.m", f"{body}.mh", f"{body}.mh2"] + ([f"{body}.h"] if h_col else [])
    # inertia terms about the body's own centre of mass: chassis as given; payload scales with its mass
    mp0 = v.payload.mass_kg
    for axis in ("pitch", "yaw"):
        ci = bounds(f"chassis.{axis}_inertia_kg_m2")
        groups.append(np.array(sorted({ci[0], ci[1]}))[:, None])
        cols.append(f"chassis.{axis}")
        pi = bounds(f"payload.{axis}_inertia_kg_m2")
        if _ranged(box, "payload.mass_kg") and mp0 > 0:
            if _ranged(box, f"payload.{axis}_inertia_kg_m2"):
                m = bounds("payload.mass_kg")
                prods = [a / mp0 * b for a in m for b in pi]
                groups.append(np.array(sorted({min(prods), max(prods)}))[:, None])
                cols.append(f"payload.{axis}")
            else:
                cols.append(f"payload.{axis}:per_kg")  # linear in the payload-mass column
        else:
            groups.append(np.array(sorted({pi[0], pi[1]}))[:, None])
            cols.append(f"payload.{axis}")
    kt = bounds("drive.torque_constant_n_m_per_a")
    ktn = v.drive.torque_constant_n_m_per_a
    groups.append(np.array(sorted({kt[0] / ktn, kt[1] / ktn}))[:, None])
    cols.append("k")
    cb = bounds("wheel.bearing_friction_n_m_s_per_rad")
    groups.append(np.array(sorted({cb[0], cb[1]}))[:, None])
    cols.append("c_b")
    if schedule is not None:
        if schedule.parameter not in SCHEDULABLE:
            raise ValueError(
                f"a gain can be scheduled on {', '.join(SCHEDULABLE)} only (the LMIs need the measured value to "
                f"be a coordinate of the moment polytope), got {schedule.parameter!r}"
            )
        err = float(schedule.error)
        groups.append(np.array(sorted({-err, err}))[:, None])
        cols.append("error")
    combos = list(itertools.product(*[range(g.shape[0]) for g in groups]))
    rows = []
    for combo in combos:
        rows.append(np.concatenate([g[i] for g, i in zip(groups, combo)]))
    V = np.array(rows)
    data_cols = [c for c in cols if not c.endswith(":per_kg")]
    col = {c: V[:, j] for j, c in enumerate(data_cols)}

    def inertia(axis):
        c_term = col[f"chassis.{axis}"]
        if f"payload.{axis}" in col:
            p_term = col[f"payload.{axis}"]
        else:
            p_term = col["payload.m"] * get_parameter(v, f"payload.{axis}_inertia_kg_m2") / mp0
        return c_term + p_term

    r, d = v.wheel.radius_m, v.wheel.half_track_m
    mw, Jw, Kw = v.wheel.mass_kg, v.wheel.spin_inertia_kg_m2, v.wheel.diametral_inertia_kg_m2
    m11 = 2 * mw + 2 * Jw / r**2 + col["chassis.m"] + col["payload.m"]
    Ml = col["chassis.mh"] + col["payload.mh"]
    m33 = inertia("pitch") + col["chassis.mh2"] + col["payload.mh2"]
    m22 = 2 * mw * d**2 + 2 * Jw * d**2 / r**2 + 2 * Kw + inertia("yaw")
    q = np.stack([m11, m22, m33, Ml, col["k"], col["c_b"]], axis=1)
    if schedule is not None:
        measured = col["payload.h"] if on_height else col["payload.m"]
        d = measured + col["error"] - float(schedule.nominal)
        qdw = np.unique(np.round(np.column_stack([q, d, col["k"] * d]), 12), axis=0)
        kept = hull_vertices(qdw)
        fixed = moment_box(box)
        poly = _moment_polytope(box, kept[:, :6], int(qdw.shape[0]), cols)
        facts = dict(
            poly.facts,
            scheduling={
                "parameter": schedule.parameter,
                "nominal": float(schedule.nominal),
                "measurement_error": err,
                "deviation_range": [float(kept[:, 6].min()), float(kept[:, 6].max())],
                "reduced_in": "moments q, deviation d and k d",
            },
        )
        guarantee = poly.guarantee + (
            f"; the gain is scheduled on the measured {schedule.parameter} (measurement error within +-{err:g}), "
            "and the vertices also span the measured value and its product with the torque-constant ratio"
        )
        return Polytope("moment_box", poly.E, poly.A, poly.B, guarantee, facts, schedule=kept[:, 6], fixed=fixed)
    # drop duplicate vertices, then those that are convex combinations of the others (E, A and B are affine
    # in q, so the hull of the remaining points maps to the same polytope of models)
    q = np.unique(np.round(q, 12), axis=0)
    return _moment_polytope(box, hull_vertices(q), int(q.shape[0]), cols)


def _moment_polytope(box: Box, q: np.ndarray, product_vertices: int, cols: list[str]) -> Polytope:
    """The descriptor polytope of the moment vertices ``q`` (already reduced)."""
    mats = descriptor_matrices(box, q)
    Ev = np.linalg.eigvalsh(mats["E"]).min(axis=1)
    if np.any(Ev <= 0):
        raise ValueError("the moment polytope reaches a singular mass matrix; narrow the ranges or use 'sampled_hull'")
    facts = {
        "moment_intervals": {n: [float(q[:, j].min()), float(q[:, j].max())] for j, n in enumerate(MOMENT_NAMES)},
        "moment_units": dict(zip(MOMENT_NAMES, MOMENT_UNITS)),
        "groups": cols,
        "product_vertices": product_vertices,
        "vertices_after_reduction": int(q.shape[0]),
        "smallest_mass_matrix_eigenvalue": float(Ev.min()),
    }
    guarantee = (
        "rigorous: E, A and B are affine in the mass moments (m, m h, m h^2) of chassis and payload, the "
        "inertias, the torque-constant ratio and the friction, and the moment polytope contains the image "
        "of the whole box; with a common Lyapunov matrix the certificate holds for constant or "
        "time-varying parameters"
    )
    return Polytope("moment_box", mats["E"], mats["A"], mats["B"], guarantee, facts)


def descriptor_matrices(box: Box, q: np.ndarray) -> dict[str, np.ndarray]:
    """``E``, ``A``, ``B`` of the descriptor form at moments ``q`` ``(m, 6)`` (order of MOMENT_NAMES).

    ``E = [[m11,0,0,Ml],[0,m22,0,0],[0,0,1,0],[Ml,0,0,m33]]``; ``A`` holds the
    friction terms, the kinematic row and ``g M l``; ``B`` the torque terms.
    Linearising :mod:`robust.dynamics` at upright and multiplying by the mass
    matrix gives exactly these (the tests compare ``E^-1 A`` with the reduced model).
    """
    v = box.vehicle
    r, d, g = v.wheel.radius_m, v.wheel.half_track_m, v.gravity_m_s2
    m11, m22, m33, Ml, k, cb = (q[:, i] for i in range(6))
    n = q.shape[0]
    E = np.zeros((n, 4, 4))
    E[:, 0, 0], E[:, 0, 3], E[:, 3, 0], E[:, 3, 3] = m11, Ml, Ml, m33
    E[:, 1, 1] = m22
    E[:, 2, 2] = 1.0
    A = np.zeros((n, 4, 4))
    A[:, 0, 0] = -2 * cb / r**2
    A[:, 0, 3] = 2 * cb / r
    A[:, 1, 1] = -2 * cb * d**2 / r**2
    A[:, 2, 3] = 1.0
    A[:, 3, 0] = 2 * cb / r
    A[:, 3, 2] = g * Ml
    A[:, 3, 3] = -2 * cb
    B = np.zeros((n, 4, 2))
    B[:, 0, :] = (k / r)[:, None]
    B[:, 1, 0] = -k * d / r
    B[:, 1, 1] = k * d / r
    B[:, 3, :] = -k[:, None]
    return {"E": E, "A": A, "B": B}


def build_polytope(box: Box, route: str, **options) -> Polytope:
    """The polytope of the named route (see :data:`ROUTES`)."""
    if route == "sampled_hull":
        return sampled_hull(box, **options)
    if route == "moment_box":
        return moment_box(box)
    raise ValueError(f"unknown route {route!r}; expected one of {', '.join(ROUTES)}")
