"""Reducer throughput: per-scan reduction of 64 channels, and shape-aware block means.

Per scan (issue 4 target ≥ 20 million channel-samples/s on one core): counts → Pa, Cp and the plain trapezoid
integral on blocks of 1,000 scans of the 64-channel example rig, beside a per-sample Python loop doing the same
arithmetic in the same run. Block means (target ≥ 50/s): ``Reducer.reduce_mean`` on short blocks (mean, GUM
budget, plain and shape-aware integrals, wall corrections), beside the naive way of rebuilding the shape-aware
integrator's design matrices for every mean.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import numpy as np

from taprig.bench import Record, best_of
from taprig.physics.integration import ShapeFitIntegrator, trapezoid_weights
from taprig.protocol import RawBlock
from taprig.reduce import Reducer
from taprig.rig import load_rig

SCANS = 1000
MEAN_SCANS = 100


def _rig_path() -> Path:
    """The 64-channel example rig beside the package (a source checkout)."""
    root = Path(str(resources.files("taprig"))).resolve().parents[1]
    return root / "rigs" / "bench-64.toml"


def _block(reducer: Reducer, n_scans: int, seed: int = 3) -> RawBlock:
    """A block with q ≈ 300 Pa, thin-airfoil-like tap pressures and sensor noise, as counts."""
    rng = np.random.default_rng(seed)
    chans = tuple(c.index for c in reducer.rig.channels)
    plan = reducer.plan(chans)
    p = rng.normal(0.0, 2.0, (n_scans, len(chans)))
    p[:, plan.q.cols[0][0]] += 300.0
    p[:, plan.tap_columns] += rng.uniform(-400.0, 200.0, plan.tap_columns.size)
    for col, index in enumerate(chans):
        lo, hi = reducer.rig.sensor_of(index).range
        if lo > 0.0:  # an absolute channel: put it mid-range
            p[:, col] += 0.5 * (lo + hi)
    counts = np.round(p / plan.scale + plan.zero)
    return RawBlock(counts, chans, np.arange(n_scans, dtype=np.int64) * 1000, np.arange(n_scans, dtype=np.int64))


def _python_loop(reducer: Reducer, block: RawBlock, n_scans: int) -> None:
    """The naive reduction: every sample converted, referred and integrated in plain Python."""
    plan = reducer.plan(block.channels)
    zero, scale = plan.zero.tolist(), plan.scale.tolist()
    q_col = int(plan.q.cols[0][0])
    taps = plan.tap_columns.tolist()
    lay = reducer.layout.contour
    w = trapezoid_weights(lay.x_c, lay.y_c)
    wn, wa, wm = w.normal.tolist(), w.axial.tolist(), w.moment.tolist()
    for row in block.counts[:n_scans].tolist():
        p = [(c - z) * s for c, z, s in zip(row, zero, scale)]
        q = p[q_col]
        cp = [p[t] / q for t in taps]
        cn = sum(a * b for a, b in zip(wn, cp))
        ca = sum(a * b for a, b in zip(wa, cp))
        _ = (cn, ca, sum(a * b for a, b in zip(wm, cp)))


def run(quick: bool) -> list[Record]:
    """Measure the per-scan and block-mean rates with their baselines (see the module docstring)."""
    reducer = Reducer(load_rig(_rig_path()))
    block = _block(reducer, SCANS)
    channels = block.counts.shape[1]
    repeats = 3 if quick else 21  # a median of many: the machine is shared
    t_vec = best_of(lambda: reducer.reduce(block), repeats)
    loop_scans = 50 if quick else 200
    t_loop = best_of(lambda: _python_loop(reducer, block, loop_scans), 3) * SCANS / loop_scans
    rate, base = SCANS * channels / t_vec, SCANS * channels / t_loop
    short = _block(reducer, MEAN_SCANS, seed=5)
    t_mean = best_of(lambda: reducer.reduce_mean(short), repeats)
    lay = reducer.rig.tap_layout()
    t_naive = best_of(lambda: (ShapeFitIntegrator(reducer.rig.section.shape, lay.x_c, lay.upper),
                               reducer.reduce_mean(short)), 1 if quick else 3)
    return [
        Record("reduce: pressures, Cp, plain integral per scan (64 ch, 1000-scan blocks)", rate,
               "channel-samples/s", base, rate / base, ">= 2e7 channel-samples/s"),
        Record(f"reduce_mean: shape-aware block means ({MEAN_SCANS} scans)", 1.0 / t_mean, "means/s",
               1.0 / t_naive, t_naive / t_mean, ">= 50 means/s"),
    ]
