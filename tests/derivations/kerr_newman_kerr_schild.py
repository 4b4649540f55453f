"""Development-time derivation of the closed forms used by emsource.exact.kerr_schild.

Run:  python tests/derivations/kerr_newman_kerr_schild.py
It derives, with sympy, the first derivatives of the spheroidal radius r, of H, of l_i and of
the potential P = Q r^3 / (r^4 + a^2 z^2), simplifies them, and checks them against the closed
forms written in the module docstring; it also checks the algebraic facts that the 3+1 split
relies on (l null, det gamma = 1 + 2 H, the inverse metric, the lapse and shift). It prints
each check and exits non-zero if one fails. The package itself never imports sympy.

Kerr-Schild form g = eta + 2 H l l with H, l, A as in the module docstring (from memory, in the
form of Misner, Thorne & Wheeler, Gravitation (1973), ch. 33).
"""

import sys

import sympy as sp

x, y, z, t = sp.symbols("x y z t", real=True)
M, a, Q = sp.symbols("M a Q", positive=True)
r = sp.Function("r", positive=True)(x, y, z)
R = sp.symbols("R", positive=True)  # stands for r(x, y, z) after differentiation

failures = []


def check(name, expr):
    expr = sp.simplify(expr)
    ok = expr == 0 or expr == sp.zeros(*expr.shape) if hasattr(expr, "shape") else expr == 0
    print(f"{'ok  ' if ok else 'FAIL'} {name}")
    if not ok:
        failures.append(name)


# Defining relation of r and its gradient by implicit differentiation.
F = (x**2 + y**2) / (r**2 + a**2) + z**2 / r**2 - 1
grad_r = sp.solve([sp.diff(F, v) for v in (x, y, z)], [sp.diff(r, v) for v in (x, y, z)], dict=True)[0]
s = R**2 + a**2
D = R**4 + a**2 * z**2
closed_dr = (x * R**3 / D, y * R**3 / D, z * R * s / D)
# Points of the surface r = R, parametrised by spheroidal angles (th, ph).
th, ph = sp.symbols("theta phi", real=True)
on_surface = {x: sp.sqrt(s) * sp.sin(th) * sp.cos(ph), y: sp.sqrt(s) * sp.sin(th) * sp.sin(ph),
              z: R * sp.cos(th)}
for v, closed in zip((x, y, z), closed_dr):
    derived = grad_r[sp.diff(r, v)].subs(r, R)
    check(f"d r / d {v}", sp.trigsimp(sp.simplify((derived - closed).subs(on_surface))))


def d(expr, v):
    """Total derivative through r(x, y, z), then r -> R and the closed d_i r."""
    total = sp.diff(expr, v)
    for w, closed in zip((x, y, z), closed_dr):
        total = total.subs(sp.diff(r, w), closed)
    return total.subs(r, R)


H = r**2 * (M * r - Q**2 / 2) / (r**4 + a**2 * z**2)
l = [(r * x + a * y) / (r**2 + a**2), (r * y - a * x) / (r**2 + a**2), z / r]
P = Q * r**3 / (r**4 + a**2 * z**2)

Hn = H.subs(r, R)
H_r = ((3 * M * R**2 - Q**2 * R) * D - 4 * R**5 * (M * R - Q**2 / 2)) / D**2
H_z = -2 * a**2 * z * R**2 * (M * R - Q**2 / 2) / D**2
check("dH/dr|z", sp.diff(Hn, R) - H_r)
check("dH/dz|r", sp.diff(Hn, z) - H_z)
Pn = P.subs(r, R)
check("dP/dr|z", sp.diff(Pn, R) - Q * R**2 * (3 * a**2 * z**2 - R**4) / D**2)
check("dP/dz|r", sp.diff(Pn, z) - (-2 * a**2 * z * Q * R**3 / D**2))

# l null: l_i l_i = l_t^2 = 1 on the surface F = 0.
ln = [c.subs(r, R) for c in l]
norm = sp.together(sum(c**2 for c in ln) - 1)
check("l_i l_i = 1", sp.trigsimp(sp.simplify(norm.subs(on_surface))))

# Inverse and determinant of gamma = delta + 2 H l l for a unit vector l (symbolic l).
h = sp.symbols("h", real=True)
L = sp.Matrix([sp.sin(th) * sp.cos(ph), sp.sin(th) * sp.sin(ph), sp.cos(th)])
unit = {}
gam = sp.eye(3) + 2 * h * L * L.T
inv = sp.eye(3) - 2 * h / (1 + 2 * h) * L * L.T
check("det gamma = 1 + 2H", sp.trigsimp(sp.expand(gam.det())) - (1 + 2 * h))
check("gamma^-1", sp.trigsimp(sp.simplify(gam * inv - sp.eye(3))))
# 4-metric from (alpha, beta) equals eta + 2 H l l with l_t = 1.
alpha = 1 / sp.sqrt(1 + 2 * h)
beta_low = 2 * h * L
beta_up = inv * beta_low
g_tt = -alpha**2 + (beta_low.T * beta_up)[0]
check("g_tt = -1 + 2H", sp.trigsimp(sp.simplify(g_tt)) - (-1 + 2 * h))
check("beta^i = 2H l_i / (1 + 2H)", sp.trigsimp(sp.simplify(beta_up - beta_low / (1 + 2 * h))))

print("closed forms used by emsource.exact.kerr_schild:")
print("  d_i r =", closed_dr)
print("  dH/dr|z =", sp.factor(H_r))
print("  dH/dz|r =", sp.factor(H_z))
sys.exit(1 if failures else 0)
