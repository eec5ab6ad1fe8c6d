"""Small linear test systems with known observability, and a LinearModel factory.

Thermal RC ladder (common practice): n equal heat capacities in a row, equal
conductances between neighbors and from each end node to a fixed ambient,
all scaled to 1, so with node temperatures T

    dT/dt = −L T,   L = tridiag(−1, 2, −1)   (Dirichlet Laplacian of a path).

Mass-spring chain (common practice): n unit masses, unit springs between
neighbors and from each end mass to a wall, no damping, states
(positions q, velocities v):

    dq/dt = v,   dv/dt = −L q.

Both are symmetric under the reflection R: node j <-> node n−1−j (RLR = L).
The eigenvectors of L are s_k[j] = sin((j+1)kπ/(n+1)), k = 1..n, with
eigenvalues 2 − 2cos(kπ/(n+1)) (all distinct), symmetric for odd k and
antisymmetric for even k (Strang, "Linear Algebra and Its Applications",
section on the second-difference matrix — from memory).
"""

from __future__ import annotations

import numpy as np

from linobs.linear.linear_model import JacobianErrors, LinearModel, ModelIdentity


def laplacian(n: int) -> np.ndarray:
    return 2.0 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)


def thermal_ladder(n: int) -> np.ndarray:
    return -laplacian(n)


def mass_spring_chain(n: int) -> np.ndarray:
    z = np.zeros((n, n))
    return np.block([[z, np.eye(n)], [-laplacian(n), z]])


def node_output(n_states: int, node: int) -> np.ndarray:
    C = np.zeros((1, n_states))
    C[0, node] = 1.0
    return C


def antisymmetric_basis(n: int, mass_spring: bool) -> np.ndarray:
    """Orthonormal basis of the antisymmetric subspace {x : R x = −x} (per state block)."""
    cols = []
    for j in range(n // 2):
        v = np.zeros(n)
        v[j], v[n - 1 - j] = 1.0, -1.0
        cols.append(v / np.sqrt(2.0))
    basis = np.array(cols).T.reshape(n, -1)
    if not mass_spring:
        return basis
    z = np.zeros_like(basis)
    return np.block([[basis, z], [z, basis]])


def cart_pendulum(M: float = 1.0, m: float = 0.2, length: float = 0.5,
                  g: float = 9.81) -> tuple[np.ndarray, np.ndarray]:
    """Frictionless cart (mass M) with a point-mass pendulum (m, length) linearized upright.

    States (x, dx/dt, θ, dθ/dt), input force u on the cart; small-angle equations
    (Ogata, "Modern Control Engineering", inverted pendulum example — from memory):
    M ẍ = u − m g θ,   M l θ̈ = (M + m) g θ − u.
    """
    A = np.array([
        [0.0, 1.0, 0.0, 0.0],
        [0.0, 0.0, -m * g / M, 0.0],
        [0.0, 0.0, 0.0, 1.0],
        [0.0, 0.0, (M + m) * g / (M * length), 0.0],
    ])
    B = np.array([[0.0], [1.0 / M], [0.0], [-1.0 / (M * length)]])
    return A, B


def linear_model(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray | None = None, *,
                 states: list[str] | None = None, inputs: list[str] | None = None,
                 outputs: list[str] | None = None, x0: np.ndarray | None = None,
                 u0: np.ndarray | None = None, y0: np.ndarray | None = None,
                 dx0: np.ndarray | None = None, state_nominal: np.ndarray | None = None,
                 output_nominal: np.ndarray | None = None) -> LinearModel:
    """A LinearModel from arrays (the fields that are not about (A, B, C, D) are placeholders)."""
    A, B, C = (np.asarray(M, dtype=float) for M in (A, B, C))
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    D = np.zeros((p, m)) if D is None else np.asarray(D, dtype=float)
    states = states or [f"x{i}" for i in range(n)]
    inputs = inputs or [f"u{i}" for i in range(m)]
    outputs = outputs or [f"y{i}" for i in range(p)]
    zeros = np.zeros
    return LinearModel(
        states=states, inputs=inputs, outputs=outputs, state_units=[None] * n,
        input_units=[None] * m, output_units=[None] * p,
        state_nominal=np.ones(n) if state_nominal is None else state_nominal,
        input_nominal=np.ones(m),
        output_nominal=np.ones(p) if output_nominal is None else output_nominal,
        A=A, B=B, C=C, D=D, x0=zeros(n) if x0 is None else x0,
        u0=zeros(m) if u0 is None else u0, y0=zeros(p) if y0 is None else y0,
        dx0=zeros(n) if dx0 is None else dx0, parameters={}, method="exact",
        requested_method="exact", column_schemes=["exact"] * (n + m), steps=zeros(n + m),
        errors=JacobianErrors(A=zeros((n, n)), B=zeros((n, m)), C=zeros((p, n)),
                              D=zeros((p, m))),
        evaluations=0, column_groups=0, used_structure=False,
        model=ModelIdentity(model_name="test", guid="test", sha256="0" * 64, fmi_version="2.0"))
