"""Independent derivation of the vehicle's equations of motion with sympy.physics.mechanics.

Kane's method on six coordinates (x, y, heading, pitch, left and right wheel
angle) with the three no-slip rolling constraints written from the contact
point velocities, as in the rolling-disc example of the sympy documentation.
Used by the tests only; it shares no code with ``robust.dynamics``.
"""

from __future__ import annotations

import functools

import sympy as sm
import sympy.physics.mechanics as me


@functools.lru_cache(maxsize=1)
def derive():
    """Return a numeric function ``f(params, state, torque) -> (v', w', p'')``."""
    x, y, psi, th, phl, phr = me.dynamicsymbols("x y psi th phl phr")
    ux, uy, upsi, uth, ul, ur = me.dynamicsymbols("ux uy upsi uth ul ur")
    r, mw, Jw, Kw, d, cb, M, l, I1, I2, I3, g, tl, tr = sm.symbols("r m_w J_w K_w d c_b M l I1 I2 I3 g tau_l tau_r")
    N = me.ReferenceFrame("N")
    Yf = N.orientnew("Y", "Axis", [psi, N.z])  # yaw frame: x forward, y left
    Bf = Yf.orientnew("B", "Axis", [th, Yf.y])  # body frame, pitch about the axle
    WL = Yf.orientnew("WL", "Axis", [phl, Yf.y])
    WR = Yf.orientnew("WR", "Axis", [phr, Yf.y])
    for frame, u, base in ((Yf, upsi * N.z, N), (Bf, uth * Yf.y, Yf)):
        frame.set_ang_vel(base, u)
    WL.set_ang_vel(Yf, (ul + uth) * Yf.y)  # ul: spin relative to the body
    WR.set_ang_vel(Yf, (ur + uth) * Yf.y)

    O = me.Point("O")
    O.set_vel(N, 0)
    A = O.locatenew("A", x * N.x + y * N.y + r * N.z)
    A.set_vel(N, ux * N.x + uy * N.y)
    G = A.locatenew("G", l * Bf.z)
    G.v2pt_theory(A, N, Bf)
    CL = A.locatenew("CL", d * Yf.y)
    CR = A.locatenew("CR", -d * Yf.y)
    CL.v2pt_theory(A, N, Yf)
    CR.v2pt_theory(A, N, Yf)
    # contact points fixed in each wheel
    PL = CL.locatenew("PL", -r * N.z)
    PR = CR.locatenew("PR", -r * N.z)
    PL.v2pt_theory(CL, N, WL)
    PR.v2pt_theory(CR, N, WR)
    vL = PL.vel(N)
    vR = PR.vel(N)
    constraints = [vL.dot(Yf.x), vR.dot(Yf.x), vL.dot(Yf.y)]

    body = me.RigidBody("body", G, Bf, M, (me.inertia(Bf, I1, I2, I3), G))
    wl = me.RigidBody("wl", CL, WL, mw, (me.inertia(Yf, Kw, Jw, Kw), CL))
    wr = me.RigidBody("wr", CR, WR, mw, (me.inertia(Yf, Kw, Jw, Kw), CR))
    fric_l = tl - cb * ul
    fric_r = tr - cb * ur
    loads = [
        (G, -M * g * N.z),
        (CL, -mw * g * N.z),
        (CR, -mw * g * N.z),
        (WL, fric_l * Yf.y),
        (WR, fric_r * Yf.y),
        (Bf, -(fric_l + fric_r) * Yf.y),
    ]
    kd = [
        x.diff() - ux,
        y.diff() - uy,
        psi.diff() - upsi,
        th.diff() - uth,
        phl.diff() - (ul + uth),
        phr.diff() - (ur + uth),
    ]
    km = me.KanesMethod(
        N,
        q_ind=[x, y, psi, th, phl, phr],
        u_ind=[uth, ul, ur],
        u_dependent=[ux, uy, upsi],
        kd_eqs=kd,
        velocity_constraints=constraints,
    )
    fr, frstar = km.kanes_equations([body, wl, wr], loads)
    mass = km.mass_matrix
    forcing = km.forcing
    params = [r, mw, Jw, Kw, d, cb, M, l, I1, I2, I3, g, tl, tr]
    qs = [x, y, psi, th, phl, phr]
    us = [uth, ul, ur, ux, uy, upsi]
    sym_q = sm.symbols("q0:6")
    sym_u = sm.symbols("s0:6")
    subs = dict(zip(qs, sym_q)) | dict(zip(us, sym_u))
    mass_f = sm.lambdify([params, sym_q, sym_u], me.msubs(mass, subs), "numpy")
    forcing_f = sm.lambdify([params, sym_q, sym_u], me.msubs(forcing, subs), "numpy")
    dep_f = sm.lambdify(
        [params, sym_q, sym_u[:3]],
        me.msubs(km._Ars * sm.Matrix([uth, ul, ur]), subs),
        "numpy",
    )
    return mass_f, forcing_f, dep_f
