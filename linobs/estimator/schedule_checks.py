"""Consistency checks of gain-schedule data (helpers of :mod:`linobs.estimator.schedule`)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.node import NodeDesign

ROLES = ("state", "input", "parameter")


def sources(axes: list[str], roles: Mapping[str, str], states: list[str], inputs: list[str]
             ) -> dict[str, tuple[str, int | None]]:
    out: dict[str, tuple[str, int | None]] = {}
    missing = [a for a in axes if a not in roles]
    if missing:
        raise UsageError(f"give the scheduling role (state, input or parameter) of "
                         f"{', '.join(missing)}")
    for name in axes:
        role = roles[name]
        if role == "state":
            if name not in states:
                raise UsageError(f"the scheduling variable {name!r} is marked a state but the "
                                 f"estimator's states are {', '.join(states)}")
            out[name] = (role, states.index(name))
        elif role == "input":
            if name not in inputs:
                raise UsageError(f"the scheduling variable {name!r} is marked an input but the "
                                 f"estimator's inputs are {', '.join(inputs) or 'none'}")
            out[name] = (role, inputs.index(name))
        else:
            out[name] = (role, None)
    return out


def check_nodes(nodes: Sequence[NodeDesign], first: NodeDesign) -> None:
    """Every node must describe the same estimator, with matrices of the right shapes."""
    n, m, p = len(first.states), len(first.inputs), len(first.outputs)
    shapes = {"A": (n, n), "B": (n, m), "C": (p, n), "D": (p, m), "Phi": (n, n),
              "Gamma": (n, m), "Gamma0": (n, n), "x0": (n,), "u0": (m,), "y0": (p,), "dx0": (n,)}
    for i, node in enumerate(nodes):
        for attr in ("kind", "domain", "form", "states", "inputs", "outputs"):
            if getattr(node, attr) != getattr(first, attr):
                raise UsageError(f"node {i} has {attr} {getattr(node, attr)!r} but the schedule's "
                                 f"first designed node has {getattr(first, attr)!r}; a schedule "
                                 f"holds one kind of estimator — redesign with one setting")
        if not np.isclose(node.sample_time, first.sample_time, rtol=1e-12, atol=0.0):
            raise UsageError(f"node {i} has sample time {node.sample_time} but the schedule uses "
                             f"{first.sample_time}; design every node at one sample time")
        for name, shape in shapes.items():
            if np.shape(getattr(node, name)) != shape:
                raise UsageError(f"node {i}: {name} has shape {np.shape(getattr(node, name))}, "
                                 f"expected {shape} for {n} states, {m} inputs, {p} outputs")
        if node.status == "ok":
            if np.shape(node.L) != (n, p) or not np.all(np.isfinite(node.L)):
                raise UsageError(f"node {i}: the gain L must be a finite {n} x {p} matrix, got "
                                 f"shape {np.shape(node.L)}")
            if node.L_continuous is not None and np.size(node.L_continuous) and \
                    np.shape(node.L_continuous) != (n, p):
                raise UsageError(f"node {i}: L_continuous has shape "
                                 f"{np.shape(node.L_continuous)}, expected {(n, p)}")


def has_continuous(nodes: Sequence[NodeDesign]) -> bool:
    ok = [n for n in nodes if n.status == "ok"]
    return all(n.L_continuous is not None and np.size(n.L_continuous) > 0 for n in ok)


def field_array(node: NodeDesign, name: str, template: NodeDesign) -> np.ndarray:
    """A node's quantity as an array; refused nodes get a zero gain of the right shape
    (never used: every value depending on it is unusable and carries NaN gains)."""
    value = getattr(node, name)
    if name in ("L", "L_continuous") and (node.status != "ok" or value is None
                                          or np.size(value) == 0):
        return np.zeros(np.shape(template.L))
    return np.asarray(value, dtype=float)
