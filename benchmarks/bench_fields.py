"""Throughput, cost and first-call latency of the field layer (instantonkit.engine.fields on ADHM data).

Rows (see :func:`run`), each with its ratio to a reference measured in the same run:

* points per second of the closed-form action density of SU(2) ADHM data, k = 1, 2, 4, 8 (BPST for
  k = 1, random data otherwise): ratio to the goal where there is one (k = 4, 8), else to
  the per-point kernel (``jit(vmap(data.action_density))``, the engine's route before the batch-major
  kernels), whose rate and difference the reference names;
* a roofline for k > 1: the flops per point counted for the kernel (``_kxk.flops_per_point``, ratio:
  XLA's cost analysis / the count), the bound it allows (a fused elementwise jax loop's GFLOP/s,
  measured in the same run, / the count; ratio: achieved / bound) and the achieved GFLOP/s as a
  fraction of a large numpy matrix product's rate, so a slow kernel shows whether it computes too
  much or computes slowly;
* the k = 1 density (ADHM data and ``BPSTField``) relative to plain numpy evaluating
  48 rho^4 / (|x - a|^2 + rho^2)^4 on the same 10^6 points (goal <= 1.5);
* a plain-numpy finite-difference pipeline at k = 4 as a user writes it by hand (ADHM null space by
  numpy's SVD, the potential and the field strength by central differences): its points/s, its
  error against the closed form, and the closed form's speed-up over it (goal >= 200);
* first calls (trace + compile + run on 64 points) of the closed-form density (k = 1, 4), the
  autodiff field strength (k = 4), a user callable, and a five-value parameter scan over a user
  ansatz (``fields.ParametrisedField``, with the number of compilations it cost, goal 1); with the
  persistent compilation cache (a fresh process twice on one cache directory) for full-size runs.

Usage: ``python benchmarks/bench_fields.py [--quick] [--points N] [--ks 1 2 4 8] [--ranks 1 2]``;
10^6 points by default, 10^4 and k = 1, 4 only with ``--quick`` (each k compiles its own kernels).  The machine is often shared: compare the ratios (both
sides measured in the same run), not the absolute figures.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import jax
import jax.numpy as jnp
import numpy as np

import instantonkit as ik
from instantonkit.adhm import _kxk
from instantonkit.core._batching import run_batched
from instantonkit.core.conventions import QUATERNION_BASIS
from instantonkit.core.quaternion import thooft_eta
from instantonkit.engine import fields

ETA = thooft_eta()

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from benchmarks.run import best_time  # noqa: E402

FULL_POINTS = 1_000_000
QUICK_POINTS = 10_000
KS = (1, 2, 4, 8)
QUICK_KS = (1, 4)
RANKS = (1, 2)
LATENCY_POINTS = 64
REFERENCE_POINTS = 32_768  # the per-point reference kernel is slow: time it on at most this many points
FD_POINTS_FULL, FD_POINTS_QUICK = 2_000, 200
FD_STEP = 1e-4  # central-difference step, relative to the configuration's scale

#: Goals (points/s of the closed-form density; ratios; seconds).
THROUGHPUT_GOALS = {4: 1e6, 8: 1.5e5}
NUMPY_GOAL_RATIO = 1.5
FD_GOAL_RATIO = 200.0
CLOSED_FIRST_CALL_GOAL_S = 0.5
AUTODIFF_FIRST_CALL_GOAL_S = 3.0


def _data(k: int, rank: int = 1) -> ik.ADHMData:
    """Benchmark configuration: a BPST (embedded in Sp(n) for rank > 1) for k = 1, random data otherwise."""
    if k == 1:
        base = ik.bpst((0.1, -0.2, 0.3, 0.0), 1.0)
        return base if rank == 1 else ik.embed_sp(base, rank)
    return ik.random_adhm(k, rank, seed=100 + 10 * k + rank)


def _points(data: ik.ADHMData, n: int, seed: int = 0) -> np.ndarray:
    """n points ~ centre + scale * N(0, 1) around the configuration; (n, 4) float64."""
    centre, scale = data.hint()
    return centre + scale * np.random.default_rng(seed).normal(size=(n, 4))


_timed = best_time


def _row(figure, value, unit, ratio=None, reference=None) -> dict:
    return {"figure": figure, "value": float(value), "unit": unit, "ratio": ratio, "reference": reference}


# -- the compute roof and the generated code's cost ------------------------------------------------


def _matmul_gflops() -> float:
    """GFLOP/s of a large float64 numpy matrix product (BLAS on every core): the roofline's compute roof."""
    a = np.random.default_rng(0).normal(size=(1200, 1200))
    a @ a
    t = _timed(lambda: a @ a, 3)
    return 2 * 1200**3 / t / 1e9


def _fused_gflops() -> float:
    """GFLOP/s of a fused elementwise jax loop (multiply-adds over a (64, 4096) float64 array, 100 flops per entry).

    The kernels' steps are such fused broadcast multiply-adds, so this is the roof they can reach on this
    machine under its current load (measured in the same run as the kernels).
    """
    x = jnp.asarray(np.random.default_rng(0).normal(size=(64, 4096)))

    def loop(x):
        y = x
        for _ in range(50):
            y = y * 0.999 + x * 0.001
        return y

    kern = jax.jit(loop)
    kern(x).block_until_ready()
    t = _timed(lambda: kern(x).block_until_ready(), 5)
    return 64 * 4096 * 100 / t / 1e9


def _flops_per_point(data, n: int) -> float:
    """Flops per point of the compiled batched density kernel, from XLA's cost analysis (nan if absent)."""
    kern = jax.jit(lambda d, p: d.density_batch(p, "action_density"))
    try:
        cost = kern.lower(data, jax.ShapeDtypeStruct((n, 4), jnp.float64)).compile().cost_analysis()
        cost = cost[0] if isinstance(cost, (list, tuple)) else cost
        return float(cost["flops"]) / n
    except Exception:  # cost analysis is optional in XLA backends
        return float("nan")


# -- reference kernels -----------------------------------------------------------------------------


def _per_point_density(data, pts: np.ndarray) -> np.ndarray:
    """The per-point closed form vmapped in chunks (the engine's route before the batch-major kernels)."""
    kern = _PER_POINT
    return run_batched(kern, [pts], fields.DEFAULT_CHUNK, shrink_last=True, out=np.empty(len(pts)), args_before=(data,))


_PER_POINT = jax.jit(jax.vmap(lambda d, x: d.action_density(x), in_axes=(None, 0)))


def _throughput_rows(k: int, n: int, repeats: int, roof: float, fused: float) -> list[dict]:
    """First call, points/s against the per-point reference, and the cost of the k x k kernel, SU(2) data."""
    data = _data(k)
    label = f"SU(2) k={k}"
    pts = _points(data, n)
    rows = []
    first = _timed(lambda: ik.action_density(data, pts[:LATENCY_POINTS]))
    if k in (1, 4):
        rows.append(
            _row(
                f"first call, closed-form density, {label}",
                first,
                "s",
                first / CLOSED_FIRST_CALL_GOAL_S,
                f"t / goal, goal <= {CLOSED_FIRST_CALL_GOAL_S:g} s",
            )
        )
    ik.action_density(data, pts[: fields.DEFAULT_CHUNK])  # compile the chunk shape of the full run
    t = _timed(lambda: ik.action_density(data, pts), repeats)
    rate = n / t
    nref = min(n, REFERENCE_POINTS)
    _per_point_density(data, pts[:nref])
    t_ref = _timed(lambda: _per_point_density(data, pts[:nref]), repeats)
    diff = float(np.max(np.abs(ik.action_density(data, pts[:nref]) / _per_point_density(data, pts[:nref]) - 1.0)))
    goal = THROUGHPUT_GOALS.get(k)
    ref = f"per-point kernel {nref / t_ref:.3g} points/s (max rel. difference {diff:.1e})"
    if goal:
        rows.append(
            _row(
                f"closed-form action density, {label}", rate, "points/s", rate / goal, f"rate / goal {goal:.3g}; {ref}"
            )
        )
    else:
        rows.append(
            _row(f"closed-form action density, {label}", rate, "points/s", rate / (nref / t_ref), f"x the {ref}")
        )
    if k == 1:
        return rows  # one rational formula: no k x k algebra to count (the numpy rows compare it)
    fpp = _flops_per_point(data, _kxk.BLOCK)  # one block: XLA counts a lax.map body once
    counted = _kxk.flops_per_point(k)
    rows.append(_row(f"flops per point, counted / XLA cost analysis, {label}", counted, "flop", fpp / counted))
    bound = fused * 1e9 / counted
    rows.append(
        _row(
            f"flop-count bound, {label}",
            bound,
            "points/s",
            rate / bound,
            f"achieved / bound; bound = fused-loop rate {fused:.3g} GFLOP/s / counted flops",
        )
    )
    achieved = counted * rate / 1e9
    rows.append(
        _row(
            f"achieved rate, {label}",
            achieved,
            "GFLOP/s",
            achieved / roof,
            f"fraction of the numpy matmul roof ({roof:.3g} GFLOP/s)",
        )
    )
    return rows


def _numpy_rows(n: int, repeats: int) -> list[dict]:
    """k = 1 ADHM action density against numpy's BPST formula on the same points."""
    center, rho = np.array([0.4, 0.3, -0.2, 0.1]), 1.5
    data = ik.bpst(center, rho)
    pts = _points(data, n, seed=1)

    def plain():
        # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85.
        return 48.0 * rho**4 / (np.sum((pts - center) ** 2, axis=-1) + rho**2) ** 4

    field = ik.bpst_field(center, rho)
    ik.action_density(data, pts)  # compile
    ik.action_density(field, pts)
    t_adhm = _timed(lambda: ik.action_density(data, pts), max(repeats, 3))
    t_field = _timed(lambda: ik.action_density(field, pts), max(repeats, 3))
    t_np = _timed(plain, max(repeats, 3))
    err = float(np.max(np.abs(ik.action_density(data, pts) / plain() - 1.0)))
    err_f = float(np.max(np.abs(ik.action_density(field, pts) / plain() - 1.0)))
    return [
        _row("numpy BPST formula", n / t_np, "points/s"),
        _row(
            "ADHM k=1 action density vs numpy",
            n / t_adhm,
            "points/s",
            t_adhm / t_np,
            f"t_adhm / t_numpy, goal <= {NUMPY_GOAL_RATIO:g} (max rel. difference {err:.1e})",
        ),
        _row(
            "BPSTField action density vs numpy",
            n / t_field,
            "points/s",
            t_field / t_np,
            f"t_field / t_numpy, goal <= {NUMPY_GOAL_RATIO:g} (max rel. difference {err_f:.1e})",
        ),
    ]


# -- a plain-numpy finite-difference pipeline, as a user writes it by hand ------------------------

_PAULI = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])


def _q_to_c(q: np.ndarray) -> np.ndarray:
    """Quaternionic matrices (..., r, c, 4) -> complex (..., 2r, 2c) with i, j, k -> -i sigma_1,2,3 (conventions)."""
    basis = np.concatenate([np.eye(2)[None], -1j * _PAULI])  # (4, 2, 2)
    blocks = np.einsum("...rca,aij->...ricj", q, basis)
    sh = q.shape[:-3] + (2 * q.shape[-3], 2 * q.shape[-2])
    return blocks.reshape(sh)


def _fd_frame(lam: np.ndarray, b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """U(x) (m, 2(n+k), 2n): null space of Delta^dag by numpy's SVD, gauge fixed by a Hermitian top block."""
    n, k = lam.shape[0], lam.shape[1]
    p = np.stack([x[:, 3], -x[:, 0], -x[:, 1], -x[:, 2]], axis=-1)  # p(x), conventions
    delta = np.broadcast_to(np.concatenate([lam, b])[None], (len(x), n + k, k, 4)).copy()
    delta[:, n + np.arange(k), np.arange(k)] -= p[:, None, :]
    dc = _q_to_c(delta)  # (m, 2(n+k), 2k)
    full = np.linalg.svd(dc, full_matrices=True)[0]
    null = full[:, :, 2 * k :]  # orthogonal complement of the range of Delta
    w, _, vh = np.linalg.svd(null[:, : 2 * n, :])
    return null @ (np.conj(np.swapaxes(vh, -1, -2)) @ np.conj(np.swapaxes(w, -1, -2)))


def _fd_potential(lam, b, x, h):
    """A_mu = U^dag d_mu U by central differences; x (m, 4) -> (m, 4, 2n, 2n)."""
    u = _fd_frame(lam, b, x)
    ud = np.conj(np.swapaxes(u, -1, -2))
    out = []
    for mu in range(4):
        e = np.zeros(4)
        e[mu] = h
        out.append(ud @ (_fd_frame(lam, b, x + e) - _fd_frame(lam, b, x - e)) / (2 * h))
    return np.stack(out, axis=1)


def _fd_action_density(lam, b, x, h):
    """s = -1/2 sum tr F F with F = d A - d A + [A, A], derivatives of A by central differences."""
    a = _fd_potential(lam, b, x, h)
    da = []
    for mu in range(4):
        e = np.zeros(4)
        e[mu] = h
        da.append((_fd_potential(lam, b, x + e, h) - _fd_potential(lam, b, x - e, h)) / (2 * h))
    da = np.stack(da, axis=1)  # (m, mu, nu, N, N) = d_mu A_nu
    comm = np.einsum("pmij,pnjk->pmnik", a, a)
    f = da - np.swapaxes(da, 1, 2) + comm - np.swapaxes(comm, 1, 2)
    return -0.5 * np.real(np.einsum("pmnij,pmnji->p", f, f))


#: The rows of :func:`_fd_rows` computed in this process, per number of points (for ``reuse``).
_FD_ROWS: dict = {}


def _fd_rows(n_fd: int, reuse: bool = False) -> list[dict]:
    """The hand-written numpy pipeline at k = 4 against the closed form, on the same points.

    reuse: return the rows this process already measured for ``n_fd`` points (copies), if any."""
    if reuse and n_fd in _FD_ROWS:
        return [dict(r) for r in _FD_ROWS[n_fd]]
    data = _data(4)
    pts = _points(data, max(n_fd, fields.DEFAULT_CHUNK), seed=2)
    h = FD_STEP * data.hint()[1]
    lam, b = np.asarray(data.lam), np.asarray(data.B)
    t_fd = _timed(lambda: _fd_action_density(lam, b, pts[:n_fd], h))
    s_fd = _fd_action_density(lam, b, pts[:n_fd], h)
    ik.action_density(data, pts)
    t = _timed(lambda: ik.action_density(data, pts), 3)
    s = ik.action_density(data, pts[:n_fd])
    err = float(np.max(np.abs(s_fd / s - 1.0)))
    rate, rate_fd = len(pts) / t, n_fd / t_fd
    rows = [
        _row(
            "numpy finite-difference pipeline, SU(2) k=4",
            rate_fd,
            "points/s",
            None,
            f"SVD null space, central differences h = {FD_STEP:g} x scale; max rel. error {err:.1e}",
        ),
        _row(
            "closed form vs the numpy pipeline, SU(2) k=4",
            rate,
            "points/s",
            rate / rate_fd,
            f"speed-up, goal >= {FD_GOAL_RATIO:g}",
        ),
    ]
    _FD_ROWS[n_fd] = [dict(r) for r in rows]
    return rows


# -- first calls ----------------------------------------------------------------------------------


def _user_potential(x, params):
    """A user's charge-one ansatz written by hand, A_mu = eta_{a mu nu} (x - c)_nu tau_a / (|x - c|^2 + rho^2).

    The regular-gauge BPST form ('t Hooft, Phys. Rev. D 14 (1976) 3432, from memory) with tau_a the
    anti-Hermitian quaternion units; only its cost matters here (the engine checks anti-Hermiticity).
    """
    y = x - params["centre"]
    tau = jnp.asarray(QUATERNION_BASIS[1:])  # (3, 2, 2), anti-Hermitian
    coef = jnp.einsum("amn,n->am", jnp.asarray(ETA), y) / (jnp.sum(y**2) + params["rho"] ** 2)  # (3, 4)
    return jnp.einsum("am,aij->mij", coef, tau)


def _first_call_rows() -> list[dict]:
    """Autodiff field strength at k = 4, a bare user callable, and a five-value parameter scan."""
    data = _data(4)
    pts = _points(data, LATENCY_POINTS, seed=3)
    rows = []
    t = _timed(lambda: fields.field_strength(data, pts, method="autodiff"))
    rows.append(
        _row(
            "first call, autodiff field strength, SU(2) k=4",
            t,
            "s",
            t / AUTODIFF_FIRST_CALL_GOAL_S,
            f"t / goal, goal <= {AUTODIFF_FIRST_CALL_GOAL_S:g} s",
        )
    )
    centre = np.array([0.1, 0.2, -0.1, 0.3])

    def user(x):
        return _user_potential(x, {"rho": 0.9, "centre": jnp.asarray(centre)})  # a closure: static data

    t = _timed(lambda: ik.action_density(user, pts))
    rows.append(
        _row(
            "first call, user callable (autodiff density)",
            t,
            "s",
            t / AUTODIFF_FIRST_CALL_GOAL_S,
            f"t / goal, goal <= {AUTODIFF_FIRST_CALL_GOAL_S:g} s",
        )
    )
    kern = fields._kernel(("action_density", "auto"))
    before = kern._cache_size()
    t0 = time.perf_counter()
    for rho in (0.5, 0.7, 0.9, 1.1, 1.3):
        ik.action_density(fields.ParametrisedField(_user_potential, {"rho": rho, "centre": centre}), pts)
    scan = time.perf_counter() - t0
    compiles = kern._cache_size() - before
    rows.append(
        _row(
            "parameter scan, 5 values of a user ansatz (ParametrisedField)",
            scan,
            "s",
            compiles,
            "compilations (goal 1)",
        )
    )
    return rows


_CACHE_PROBE = """
import time, numpy as np
t0 = time.perf_counter()
import instantonkit as ik
data = ik.random_adhm(4, 1, seed=140)
ik.action_density(data, np.zeros((64, 4)) + 0.3)
print(time.perf_counter() - t0)
"""


def _cache_rows() -> list[dict]:
    """First call in a fresh process (import included), twice on one persistent cache directory."""
    with tempfile.TemporaryDirectory() as tmp:
        env = dict(os.environ, INSTANTONKIT_COMPILE_CACHE=tmp)
        root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
        env["PYTHONPATH"] = root + os.pathsep + env.get("PYTHONPATH", "")
        times = []
        for _ in range(2):
            out = subprocess.run(
                [sys.executable, "-c", _CACHE_PROBE], env=env, capture_output=True, text=True, timeout=600
            )
            if out.returncode:
                raise RuntimeError(out.stderr[-2000:])
            times.append(float(out.stdout.strip().splitlines()[-1]))
    return [
        _row("fresh process, import + first closed-form density, SU(2) k=4, empty cache", times[0], "s"),
        _row(
            "fresh process, the same with the persistent compilation cache",
            times[1],
            "s",
            times[1] / times[0],
            "t_cached / t_empty",
        ),
    ]


def run(quick: bool = False, points: int | None = None, ks=KS, ranks=RANKS) -> list[dict]:
    """Run the field benchmarks; returns rows {figure, value, unit, ratio, reference}.

    quick: 10^4 points instead of 10^6 (``points`` overrides both); ks: the instanton numbers of the
    throughput rows; ranks: kept for the command line (the rows use SU(2); Sp(n) takes the same
    kernels' exact route).  Runs of at most 1024 points (the smoke run) skip the k = 4 pipeline,
    first-call and cache rows.
    """
    n = int(points) if points is not None else (QUICK_POINTS if quick else FULL_POINTS)
    if quick and points is None and tuple(ks) == KS:  # quick keeps k = 1 and 4 (bench_limits shows 2 and 8)
        ks = QUICK_KS
    if n < 1:
        raise ValueError(f"points must be >= 1; found {n}")
    repeats = 3 if n <= QUICK_POINTS else 2
    roof = _matmul_gflops()
    fused = _fused_gflops()
    rows = [
        _row("numpy matmul rate (compute roof)", roof, "GFLOP/s"),
        _row("fused elementwise jax loop rate (the kernels' roof)", fused, "GFLOP/s", fused / roof, "/ matmul rate"),
    ]
    for k in ks:
        rows += _throughput_rows(int(k), n, repeats, roof, fused)
    rows += _numpy_rows(n, repeats)
    if n > 1024:
        rows += _fd_rows(FD_POINTS_QUICK if n <= QUICK_POINTS else FD_POINTS_FULL)
        rows += _first_call_rows()
        if not quick:
            rows += _cache_rows()
    return rows


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Field-layer throughput, cost and first calls.")
    parser.add_argument("--quick", action="store_true", help=f"{QUICK_POINTS} points instead of {FULL_POINTS}")
    parser.add_argument("--points", type=int, default=None, help="number of points (overrides --quick)")
    parser.add_argument("--ks", type=int, nargs="+", default=list(KS), help="instanton numbers k")
    parser.add_argument("--ranks", type=int, nargs="+", default=list(RANKS), help="n of Sp(n); 1 is SU(2)")
    args = parser.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(quick=args.quick, points=args.points, ks=args.ks, ranks=args.ranks))


if __name__ == "__main__":
    main()
