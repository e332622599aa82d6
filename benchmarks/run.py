"""Benchmark harness: the diagnosis against a bare scipy baseline, per size.

    python benchmarks/run.py [--sizes small|medium|full] [--out results.jsonl]

For each generated model (benchmarks/models.py, exported to a temporary
directory as Matrix Market + CSV), every measured job runs in a child
process of its own and reports its wall times and peak resident memory
(VmHWM; reset between stages through /proc/self/clear_refs where the kernel
allows it):

* ``baseline``: scipy.io.mmread of the export, splu with SuperLU's
  MMD(A'+A), symmetric mode, diagonal pivoting, one solve;
* ``orderings`` (small and medium): fill, time and peak of SuperLU's MMD(A'+A)
  and COLAMD against our nested dissection (geometric and graph);
* ``predict``: the factor size predicted before factorizing, against the fill
  the diagnosis's factorization reports;
* ``diagnose``: conditioning.diagnose on the exported files, per stage;
* ``iterative``: the factorization-free spectrum (models whose predicted
  factor does not fit, and the free variants at small sizes), preconditioned
  by multigrid when pyamg (the ``amg`` extra) is installed;
  ``iterative-ilu``: the same with pyamg hidden (the incomplete-LU fallback);
* ``ddspmv``: the double-double residual K x against float64 K @ x;
* ``petsc1``, ``petsc2`` (``--sizes engines``): ``diagnose`` with
  ``engine="petsc"`` under ``mpiexec -n 1`` and ``-n 2`` (run the harness with
  the engine's Python, scripts/setup-petsc-engine.sh; peaks are rank 0's).

``--memory-limit 1G`` sets CONDITIONING_MEMORY_LIMIT for every job and runs
``diagnose`` even when the factor does not fit (the factorization-free
diagnosis); without it a model whose factor does not fit skips ``diagnose``.

Results are printed as they come and appended, one JSON object per job, to
``--out``. Development runs: ``--sizes small`` (about a minute).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

SIZES = {
    # (kind, n, free): plate n -> 2 n (n+1) rows; cube n -> 3 n (n+1)^2 rows
    "tiny": [("plate", 8, False), ("cube", 4, True)],  # harness smoke test (tests/test_memory_benchmark_harness.py)
    "small": [("plate", 70, False), ("cube", 10, False), ("plate", 70, True), ("cube", 10, True)],
    "medium": [("plate", 158, False), ("cube", 20, False), ("cube", 20, True)],
    "full": [("plate", 300, False), ("cube", 32, False), ("plate", 707, False), ("cube", 46, False)],
    # the sizes the certified-digits goal names: 2D 180k and 3D ~54k rows
    "certify": [("plate", 300, False), ("cube", 26, False)],
    # the PETSc engine beside the scipy engine (issue 13): 180k plate, 51k and 105k cubes
    # the factorization-free path, multigrid against incomplete LU (issue 16): 26k to 305k rows
    "amg": [("cube", 20, False), ("cube", 20, True), ("cube", 26, False), ("cube", 35, False), ("cube", 46, False)],
    "engines": [("plate", 300, False), ("cube", 25, False), ("cube", 32, False)],
}
#: Jobs that run ``diagnose`` on the PETSc engine, and their number of MPI ranks.
PETSC_RANKS = {"petsc1": 1, "petsc2": 2}
ORDERING_SIZES = ("tiny", "small", "medium")


# ----------------------------------------------------------------- in child
def _status(field: str) -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1]) * 1024
    return 0


def _reset_peak() -> bool:
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


class _Meter:
    """Wall time, CPU time (all threads of the process) and peak RSS per stage of one child job."""

    def __init__(self):
        self.stages: dict[str, dict] = {}
        self.t0 = time.perf_counter()

    def start(self, name):
        _reset_peak()
        self.stages[name] = {"t": time.perf_counter(), "c": time.process_time(),
                             "rss_start_bytes": _status("VmRSS")}

    def stop(self, name):
        st = self.stages[name]
        st["seconds"] = time.perf_counter() - st.pop("t")
        st["cpu_seconds"] = time.process_time() - st.pop("c")
        st["peak_bytes"] = _status("VmHWM")

    def result(self, **extra):
        return {"stages": self.stages, "seconds": time.perf_counter() - self.t0,
                "peak_bytes": max([s["peak_bytes"] for s in self.stages.values()] + [_status("VmHWM")]),
                **extra}


def job_export(args):
    from benchmarks import models

    m = _Meter()
    m.start("generate")
    model = (models.plate if args.kind == "plate" else models.cube)(args.n, free=args.free)
    m.stop("generate")
    m.start("write")
    paths = models.export(model, Path(args.dir))
    m.stop("write")
    return m.result(rows=int(model.K.shape[0]), nnz=int(model.K.nnz), rigid_modes=model.rigid_modes,
                    paths={k: str(v) for k, v in paths.items()})


def _read_baseline(paths):
    import numpy as np
    import scipy.io
    import scipy.sparse as sp

    K = sp.csc_array(scipy.io.mmread(paths["K"]))
    f = np.asarray(scipy.io.mmread(paths["load"])).ravel()
    return K, f


def job_baseline(args, paths):
    import numpy as np
    import scipy.sparse.linalg as spla

    m = _Meter()
    m.start("read")
    K, f = _read_baseline(paths)
    m.stop("read")
    m.start("factor")
    lu = spla.splu(K, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options=dict(SymmetricMode=True))
    m.stop("factor")
    m.start("solve")
    x = lu.solve(f)
    m.stop("solve")
    res = float(np.linalg.norm(K @ x - f) / np.linalg.norm(f))
    return m.result(fill=int(lu.nnz), relative_residual=res)


def _coords_of_rows(paths, n):
    import numpy as np

    node = np.loadtxt(paths["dofs"], delimiter=",", skiprows=1, usecols=1, dtype=np.int64)
    xyz = np.loadtxt(paths["coords"], delimiter=",", skiprows=1, usecols=(1, 2, 3))
    return xyz[node - 1]


def job_orderings(args, paths):
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    from conditioning.engine.ordering import nested_dissection

    K, _ = _read_baseline(paths)
    xyz = _coords_of_rows(paths, K.shape[0])
    out = {}
    for name in ("MMD_AT_PLUS_A", "COLAMD", "nd-geometric", "nd-graph"):
        _reset_peak()
        t0 = time.perf_counter()
        if name.startswith("nd"):
            perm = nested_dissection(sp.csr_array(K), xyz if name == "nd-geometric" else None)
            t_order = time.perf_counter() - t0
            A = sp.csc_array(K[perm][:, perm])
            spec = "NATURAL"
        else:
            t_order, A, spec = 0.0, K, name
        t1 = time.perf_counter()
        lu = spla.splu(A, permc_spec=spec, diag_pivot_thresh=0.0, options=dict(SymmetricMode=True))
        out[name] = {"order_seconds": t_order, "factor_seconds": time.perf_counter() - t1,
                     "fill": int(lu.nnz), "peak_bytes": _status("VmHWM")}
        del lu, A
    return {"orderings": out, "peak_bytes": _status("VmHWM")}


def job_predict(args, paths):
    import scipy.sparse as sp

    from conditioning.engine.memory import plan_factorization, predict_factor_memory

    K, _ = _read_baseline(paths)
    K = sp.csr_array(K)
    xyz = _coords_of_rows(paths, K.shape[0])
    m = _Meter()
    m.start("plan")
    plan = plan_factorization(K, xyz)
    m.stop("plan")
    pred = plan.prediction
    m.start("predict-mmd-proxy")
    proxy = predict_factor_memory(K, None, coords=xyz)
    m.stop("predict-mmd-proxy")
    return m.result(ordering=getattr(plan.ordering, "ordering_name", str(plan.ordering)),
                    predicted_bytes=pred.bytes, predicted_fill=pred.factor_entries,
                    predicted_flops=pred.flops, proxy_fill=proxy.factor_entries,
                    limit_bytes=plan.limit_bytes, fits=plan.fits, reads_pivots=plan.reads_pivots,
                    method=pred.method)


def job_diagnose(args, paths):
    import conditioning

    m = _Meter()

    def progress(stage, fraction):
        if fraction is None:
            m.start(stage)
        else:
            m.stop(stage)

    report = conditioning.diagnose(paths["K"], dofs=paths["dofs"], coords=paths["coords"],
                                   load=paths["load"], progress=progress, engine=args.engine)
    fi = report.factorization
    dg = report.digits
    sp_ = report.spectrum
    return m.result(status=report.status, modes=sp_.count if sp_ else None,
                    smallest=[float(v) for v in sp_.smallest[:8]] if sp_ else None,
                    spectrum_method=sp_.method if sp_ else None,
                    skipped=dict(report.skipped),
                    ordering=fi.ordering if fi else None, fill=fi.fill if fi else None,
                    timings=report.timings, verdict=report.verdict,
                    digits_methods=sorted({s.method for s in dg.samples}) if dg else None,
                    certification=dg.certification if dg else None)


def job_iterative(args, paths, *, hide_pyamg=False):
    import numpy as np

    from conditioning.engine.scaling import scale_stiffness
    from conditioning.model import Coordinates, DofTable, Model
    from conditioning.stages import spectrum_iterative as si
    from conditioning.stages.spectrum import iterative_spectrum

    if hide_pyamg:  # the fallback a user without the amg extra gets
        sys.modules["pyamg"] = None
    m = _Meter()
    m.start("read")
    K, _ = _read_baseline(paths)
    node = np.loadtxt(paths["dofs"], delimiter=",", skiprows=1, usecols=1, dtype=np.int64)
    dof = np.array([{"ux": 0, "uy": 1, "uz": 2}[d] for d in
                    np.loadtxt(paths["dofs"], delimiter=",", skiprows=1, usecols=2, dtype=str)], dtype=np.int8)
    xyz = np.loadtxt(paths["coords"], delimiter=",", skiprows=1, usecols=(1, 2, 3))
    model = Model(K.tocsr(), dofs=DofTable(node, dof),
                  coords=Coordinates(np.arange(1, xyz.shape[0] + 1), xyz, 3))
    m.stop("read")
    # Time the preconditioner's setup and LOBPCG's iterations apart (the
    # stage's own functions, wrapped here only to be timed).
    pre, core, counts = si._preconditioner, si._lobpcg_core, {}

    def timed_pre(*a):
        t = time.perf_counter()
        out = pre(*a)
        counts["preconditioner_seconds"] = time.perf_counter() - t
        return out

    def counted_core(*a):
        out = core(*a)
        counts["iterations"] = counts.get("iterations", 0) + out[2]
        return out

    si._preconditioner, si._lobpcg_core = timed_pre, counted_core
    m.start("spectrum")  # preconditioner, LOBPCG and the Lanczos estimate of lambda_max
    res = iterative_spectrum(model, k=8, rng=0)
    m.stop("spectrum")
    S = scale_stiffness(model.K).S
    residuals = np.linalg.norm(S @ res.vectors - res.vectors * res.values, axis=0)
    return m.result(near_null=res.count, converged=res.converged, smallest=[float(v) for v in res.values[:8]],
                    preconditioner_seconds=counts.get("preconditioner_seconds"), iterations=counts.get("iterations"),
                    max_residual=float(residuals.max()), method=res.method)


def job_iterative_ilu(args, paths):
    return job_iterative(args, paths, hide_pyamg=True)


def job_ddspmv(args, paths):
    import numpy as np

    try:
        from conditioning.linalg.doubledouble import dd_operator, dd_residual
    except ImportError as exc:
        return {"skipped": f"conditioning.linalg.doubledouble not available ({exc})"}
    K, f = _read_baseline(paths)
    K = K.tocsr()
    x = np.random.default_rng(0).standard_normal(K.shape[0])

    def best(fn, repeat=5):
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t0)
        return min(times)

    t_f64 = best(lambda: f - K @ x)
    t0 = time.perf_counter()
    op = dd_operator(K)
    t_prep = time.perf_counter() - t0
    t_dd = best(lambda: dd_residual(op, x, None, f))
    return {"float64_seconds": t_f64, "dd_seconds": t_dd, "dd_prepare_seconds": t_prep,
            "ratio": t_dd / t_f64, "peak_bytes": _status("VmHWM")}


#: Rounds of (shared factorization, proof) in the certify job: the first is
#: measured stage by stage with peak memory, every round's times are kept, and
#: the best of the rounds is the figure a shared machine leaves meaningful.
CERTIFY_ROUNDS = 3


def job_certify(args, paths):
    """The verified eigenvalue bound's cost against the shared factorization it
    reuses the ordering of: both timed in this child, same matrix, same ordering,
    CERTIFY_ROUNDS times in turn."""
    import numpy as np

    from conditioning.engine.scaling import scale_stiffness
    from conditioning.engine.scipy_engine import ScipyEngine
    from conditioning.linalg.verified_eigenvalue import verified_smallest_eigenvalue
    from conditioning.stages.spectrum import largest_eigenvalue

    m = _Meter()
    K, _ = _read_baseline(paths)
    K = K.tocsr()
    xyz = np.loadtxt(paths["coords"], delimiter=",", skiprows=1, usecols=(1, 2, 3))
    node = np.loadtxt(paths["dofs"], delimiter=",", skiprows=1, usecols=1, dtype=np.int64)
    rounds = []
    for r in range(CERTIFY_ROUNDS):
        fac_stage, verify_stage = ("factorize", "verify") if r == 0 else (f"factorize{r + 1}", f"verify{r + 1}")
        m.start(fac_stage)
        fac = ScipyEngine().factorize(scale_stiffness(K), coords=xyz[node - 1])
        m.stop(fac_stage)
        if r == 0:
            # lambda_min(S) estimate: 1 / lambda_max(S^-1) by Lanczos on the factor's solves.
            import scipy.sparse.linalg as spla

            n = K.shape[0]
            inv = spla.LinearOperator((n, n), matvec=lambda v: fac.solve_scaled(np.ravel(v)), dtype=np.float64)
            m.start("estimate")
            lam = 1.0 / largest_eigenvalue(inv, rtol=1e-3)
            m.stop("estimate")
            perm = fac.ordering_permutation()
        fac.release()
        del fac
        m.start(verify_stage)
        bound = verified_smallest_eigenvalue(K, lam, perm=perm)
        m.stop(verify_stage)
        rounds.append({f"{what}_{k}": m.stages[stage][k] for what, stage in
                       (("factorize", fac_stage), ("verify", verify_stage)) for k in ("seconds", "cpu_seconds")})
    best = {k: min(r[k] for r in rounds) for k in rounds[0]}
    # CPU time is less disturbed than wall time by other processes on the same
    # cores (not immune: they share caches and memory bandwidth).
    return m.result(verified=bound.verified, reason=bound.reason, rounds=rounds,
                    ratio=m.stages["verify"]["seconds"] / m.stages["factorize"]["seconds"],
                    cpu_ratio=m.stages["verify"]["cpu_seconds"] / m.stages["factorize"]["cpu_seconds"],
                    best_ratio=best["verify_seconds"] / best["factorize_seconds"],
                    best_cpu_ratio=best["verify_cpu_seconds"] / best["factorize_cpu_seconds"],
                    load_average=os.getloadavg())


JOBS = {"export": job_export, "baseline": job_baseline, "orderings": job_orderings,
        "predict": job_predict, "diagnose": job_diagnose, "iterative": job_iterative,
        "iterative-ilu": job_iterative_ilu,
        "ddspmv": job_ddspmv, "certify": job_certify}


# ---------------------------------------------------------------- in parent
def machine() -> dict:
    info = {"nproc": os.cpu_count(), "platform": platform.platform(), "python": platform.python_version()}
    try:
        with open("/proc/cpuinfo") as fh:
            info["cpu"] = next(line.split(":", 1)[1].strip() for line in fh if line.startswith("model name"))
        with open("/proc/meminfo") as fh:
            mem = {line.split(":")[0]: int(line.split()[1]) * 1024 for line in fh}
        info["mem_total_bytes"] = mem.get("MemTotal")
        info["mem_available_bytes"] = mem.get("MemAvailable")
    except (OSError, StopIteration):
        pass
    import numpy
    import scipy

    info["numpy"] = numpy.__version__
    info["scipy"] = scipy.__version__
    try:
        from threadpoolctl import threadpool_info

        info["blas"] = [(d.get("internal_api"), d.get("version"), d.get("num_threads")) for d in threadpool_info()]
    except ImportError:
        try:
            cfg = numpy.show_config(mode="dicts")
        except TypeError:  # numpy < 1.25 prints its config and takes no mode
            cfg = {}
        try:
            blas = cfg["Build Dependencies"]["blas"]
            info["blas"] = f"{blas.get('name')} {blas.get('version')} (numpy build config; threadpoolctl absent)"
        except (KeyError, TypeError):
            info["blas"] = "unknown (threadpoolctl absent)"
    return info


def run_child(job: str, spec, directory: Path, paths, timeout: float) -> dict:
    kind, n, free = spec
    mpi = []
    if job in PETSC_RANKS:  # diagnose on the PETSc engine under mpiexec
        mpi = ["mpiexec", "-n", str(PETSC_RANKS[job])]
        job = "diagnose --engine petsc"
    cmd = mpi + [sys.executable, str(Path(__file__).resolve()), "--job", *job.split(), "--kind", kind,
                 "--n", str(n), "--dir", str(directory)] + (["--free"] if free else [])
    if paths:
        cmd += ["--paths", json.dumps({k: str(v) for k, v in paths.items()})]
    t0 = time.perf_counter()
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"error": f"timeout after {timeout:.0f} s", "wall": time.perf_counter() - t0}
    wall = time.perf_counter() - t0
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("{")]
    if proc.returncode != 0 or not lines:
        tail = proc.stderr.strip().splitlines()[-3:]
        return {"error": f"exit {proc.returncode}: {' | '.join(tail)}", "wall": wall}
    out = json.loads(lines[-1])
    out["wall"] = wall
    return out


def gib(b) -> str:
    return "-" if b is None else f"{b / 2**30:.2f}G"


def summarize(name, rows, results) -> list[str]:
    base, diag = results.get("baseline", {}), results.get("diagnose", {})
    lines = [f"== {name}: {rows} rows"]
    if "seconds" in base:
        lines.append(f"  baseline   {base['seconds']:8.2f} s  peak {gib(base['peak_bytes'])}  fill {base['fill']}"
                     f"  (read {base['stages']['read']['seconds']:.2f} s, factor "
                     f"{base['stages']['factor']['seconds']:.2f} s, solve {base['stages']['solve']['seconds']:.2f} s)")
    elif base:
        lines.append(f"  baseline   {base.get('error') or base.get('skipped')}")
    if "seconds" in diag:
        lines.append(f"  diagnosis  {diag['seconds']:8.2f} s  peak {gib(diag['peak_bytes'])}  fill {diag.get('fill')}"
                     f"  ordering {diag.get('ordering')}  modes {diag.get('modes')}  status {diag.get('status')}")
        for stage, st in diag["stages"].items():
            lines.append(f"    {stage:18s} {st['seconds']:8.2f} s  peak {gib(st['peak_bytes'])}")
        if "seconds" in base:
            lines.append(f"  RATIO time {diag['seconds'] / base['seconds']:.2f}x  peak "
                         f"{diag['peak_bytes'] / base['peak_bytes']:.2f}x  (diagnosis / baseline)")
    elif diag:
        lines.append(f"  diagnosis  {diag.get('error')}")
    pred = results.get("predict", {})
    if "predicted_fill" in pred:
        actual = diag.get("fill")
        acc = f"  actual {actual} ({pred['predicted_fill'] / actual - 1:+.1%})" if actual else ""
        fst = diag.get("stages", {}).get("factorization")
        if fst:
            acc += f"; diagnosis factorization added {gib(fst['peak_bytes'] - fst['rss_start_bytes'])}"
        fst = base.get("stages", {}).get("factor")
        if fst:
            acc += f"; baseline splu added {gib(fst['peak_bytes'] - fst['rss_start_bytes'])}"
        lines.append(f"  predicted  fill {pred['predicted_fill']}{acc}; predicted bytes {gib(pred['predicted_bytes'])}"
                     f"  (ordering {pred['ordering']} + prediction {pred['stages']['plan']['seconds']:.2f} s;"
                     f" fits {pred['fits']}; MMD proxy fill {pred['proxy_fill']})")
    for k, v in results.get("orderings", {}).get("orderings", {}).items():
        lines.append(f"  order {k:14s} fill {v['fill']:>11d}  order {v['order_seconds']:6.2f} s  factor "
                     f"{v['factor_seconds']:7.2f} s  peak {gib(v['peak_bytes'])}")
    for job in ("iterative", "iterative-ilu"):
        it = results.get(job, {})
        if "seconds" in it:
            spec, pre = it["stages"]["spectrum"]["seconds"], it.get("preconditioner_seconds") or 0.0
            lines.append(f"  {job:13s} {it['seconds']:8.2f} s  peak {gib(it['peak_bytes'])}  preconditioner "
                         f"{pre:.1f} s  then {spec - pre:.1f} s, {it.get('iterations')} LOBPCG iterations"
                         f"  near-null {it['near_null']}  converged {it['converged']}  max residual "
                         f"{it['max_residual']:.1e}")
            lines.append(f"    smallest {', '.join(f'{v:.6g}' for v in it['smallest'])}")
            lines.append(f"    {it['method']}")
    dd = results.get("ddspmv", {})
    if "ratio" in dd:
        lines.append(f"  dd spmv    {dd['ratio']:.1f}x float64 K@x ({dd['dd_seconds'] * 1e3:.1f} ms vs "
                     f"{dd['float64_seconds'] * 1e3:.2f} ms; operator setup {dd['dd_prepare_seconds']:.2f} s)")
    elif dd:
        lines.append(f"  dd spmv    {dd.get('skipped') or dd.get('error')}")
    ce = results.get("certify", {})
    if "best_ratio" in ce:
        st = ce["stages"]
        lines.append(f"  certify    proof / shared factorization {ce['ratio']:.2f}x wall, {ce['cpu_ratio']:.2f}x CPU "
                     f"(best of {len(ce['rounds'])} rounds: {ce['best_ratio']:.2f}x, {ce['best_cpu_ratio']:.2f}x); peaks "
                     f"{gib(st['verify']['peak_bytes'])} / {gib(st['factorize']['peak_bytes'])}; load "
                     f"{ce['load_average'][0]:.2f}; {ce['reason']}")
    elif ce:
        lines.append(f"  certify    {ce.get('skipped') or ce.get('error')}")
    return lines


def _estimate(previous, kind, job, plan):
    """Seconds of ``job`` scaled from the previous model of the same kind by
    the ratio of predicted factorization flops; None without a previous one."""
    if (kind, job) not in previous or "predicted_flops" not in plan or job in ("ddspmv",):
        return None
    seconds, flops = previous[(kind, job)]
    return seconds * plan["predicted_flops"] / max(flops, 1.0)


def tables(path: Path) -> str:
    """Markdown tables of a results file written with ``--out``."""
    by_model: dict[str, dict] = {}
    rows_of: dict[str, int] = {}
    for line in Path(path).read_text().splitlines():
        rec = json.loads(line)
        if "model" in rec:
            by_model.setdefault(rec["model"], {})[rec["job"]] = rec["result"]
            rows_of[rec["model"]] = rec["rows"]

    def fmt_job(r):
        if "seconds" not in r:
            return r.get("skipped") or r.get("error") or "-"
        return f"{r['seconds']:.1f} s, {gib(r['peak_bytes'])}"

    out = ["| model | rows | baseline | diagnosis | time ratio | peak ratio | ordering | modes |",
           "|---|---|---|---|---|---|---|---|"]
    for name, res in by_model.items():
        b, d = res.get("baseline", {}), res.get("diagnose", {})
        ratio_t = ratio_m = "-"
        if "seconds" in b and "seconds" in d:
            ratio_t = f"{d['seconds'] / b['seconds']:.2f}x"
            ratio_m = f"{d['peak_bytes'] / b['peak_bytes']:.2f}x"
        out.append(f"| {name} | {rows_of[name]:,} | {fmt_job(b)} | {fmt_job(d)} | {ratio_t} | {ratio_m} | "
                   f"{d.get('ordering', '-')} | {d.get('modes', '-')} |")
    out += ["", "| model | stage | seconds | peak |", "|---|---|---|---|"]
    for name, res in by_model.items():
        for job in ("baseline", "diagnose"):
            for stage, st in res.get(job, {}).get("stages", {}).items():
                out.append(f"| {name} | {job}: {stage} | {st['seconds']:.2f} | {gib(st['peak_bytes'])} |")
    out += ["", "| model | predicted fill | actual fill | predicted bytes | factorization stage added | "
            "plan time | fits |", "|---|---|---|---|---|---|---|"]
    for name, res in by_model.items():
        p_, d = res.get("predict", {}), res.get("diagnose", {})
        if "predicted_fill" not in p_:
            continue
        fst = d.get("stages", {}).get("factorization")
        added = gib(fst["peak_bytes"] - fst["rss_start_bytes"]) if fst else "-"
        actual = d.get("fill")
        err = f" ({p_['predicted_fill'] / actual - 1:+.1%})" if actual else ""
        out.append(f"| {name} | {p_['predicted_fill']:,} | {actual or '-'}{err} | {gib(p_['predicted_bytes'])} | "
                   f"{added} | {p_['stages']['plan']['seconds']:.1f} s | {p_['fits']} |")
    out += ["", "| model | iterative (LOBPCG) | near-null | converged | max residual | dd spmv ratio |",
            "|---|---|---|---|---|---|"]
    for name, res in by_model.items():
        it, dd = res.get("iterative", {}), res.get("ddspmv", {})
        ratio = f"{dd['ratio']:.1f}x" if "ratio" in dd else "-"
        if "seconds" in it:
            out.append(f"| {name} | {fmt_job(it)} | {it['near_null']} | {it['converged']} | "
                       f"{it['max_residual']:.1e} | {ratio} |")
        else:
            out.append(f"| {name} | {it.get('skipped') or it.get('error') or 'not run'} | - | - | - | {ratio} |")
    return "\n".join(out)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--sizes", choices=sorted(SIZES), default="small")
    p.add_argument("--out", default=None, help="JSON-lines file to append results to")
    p.add_argument("--timeout", type=float, default=1500.0, help="seconds allowed per child job")
    p.add_argument("--only", default=None, help="comma-separated model names to run (e.g. plate2d-300)")
    p.add_argument("--jobs", default="baseline,predict,diagnose,orderings,iterative,ddspmv")
    p.add_argument("--memory-limit", default=None,
                   help="CONDITIONING_MEMORY_LIMIT for every job (e.g. 1G); diagnose then runs the factorization-free path")
    p.add_argument("--tables", default=None, help="print Markdown tables of a results file and exit")
    p.add_argument("--job", help=argparse.SUPPRESS)
    p.add_argument("--engine", default="scipy", help=argparse.SUPPRESS)
    p.add_argument("--kind", help=argparse.SUPPRESS)
    p.add_argument("--n", type=int, help=argparse.SUPPRESS)
    p.add_argument("--free", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--dir", help=argparse.SUPPRESS)
    p.add_argument("--paths", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.job:  # child
        fn = JOBS[args.job]
        out = fn(args) if args.job == "export" else fn(args, json.loads(args.paths))
        print(json.dumps(out))
        return 0

    if args.tables:
        print(tables(Path(args.tables)))
        return 0
    out_path = Path(args.out) if args.out else None
    if args.memory_limit:
        os.environ["CONDITIONING_MEMORY_LIMIT"] = args.memory_limit
    desc = machine()
    desc["loadavg"] = Path("/proc/loadavg").read_text().split()[:3]
    desc["memory_limit"] = args.memory_limit
    print("machine:", json.dumps(desc))
    if out_path:
        with out_path.open("a") as fh:
            fh.write(json.dumps({"machine": desc, "sizes": args.sizes, "date": time.strftime("%Y-%m-%d %H:%M:%S")}) + "\n")
    wanted = set(args.jobs.split(","))
    previous: dict[tuple[str, str], tuple[float, float]] = {}  # (kind, job) -> (seconds, flops)
    with tempfile.TemporaryDirectory(prefix="conditioning-bench-") as tmp:
        for spec in SIZES[args.sizes]:
            kind, n, free = spec
            name = f"{'plate2d' if kind == 'plate' else 'cube3d'}-{n}{'-free' if free else ''}"
            if args.only and name not in args.only.split(","):
                continue
            directory = Path(tmp) / name
            exp = run_child("export", spec, directory, None, args.timeout)
            if "error" in exp:
                print(f"== {name}: export failed: {exp['error']}")
                continue
            paths = exp["paths"]
            results = {"export": exp}
            print(f"-- {name}: {exp['rows']} rows, {exp['nnz']} entries, generated and written in "
                  f"{exp['seconds']:.1f} s", flush=True)
            plan = run_child("predict", spec, directory, paths, args.timeout) if "predict" in wanted else {}
            results["predict"] = plan
            fits = plan.get("fits", True)
            for job in ("baseline", "diagnose", "certify", "orderings", "iterative", "iterative-ilu", "ddspmv",
                        *PETSC_RANKS):
                if job not in wanted:
                    continue
                if job == "orderings" and args.sizes not in ORDERING_SIZES:
                    continue
                if job == "diagnose" and not fits and not args.memory_limit:
                    results[job] = {"skipped": f"predicted factorization {gib(plan.get('predicted_bytes'))} "
                                               f"exceeds the memory limit {gib(plan.get('limit_bytes'))}"}
                    print(f"   {job}: {results[job]['skipped']}", flush=True)
                    continue
                est = _estimate(previous, kind, job, plan)
                if est is not None and est > args.timeout:
                    results[job] = {"skipped": f"estimated {est:.0f} s from the previous {kind} model "
                                               f"(time x predicted flops ratio) exceeds the {args.timeout:.0f} s limit"}
                    print(f"   {job}: {results[job]['skipped']}", flush=True)
                    continue
                if job.startswith("iterative") and fits and not (free or args.sizes in ("tiny", "small")):
                    continue
                results[job] = run_child(job, spec, directory, paths, args.timeout)
                if "seconds" in results[job] and "predicted_flops" in plan:
                    previous[(kind, job)] = (results[job]["seconds"], plan["predicted_flops"])
                status = results[job].get("error", "ok")
                print(f"   {job}: {status} ({results[job].get('wall', 0):.1f} s)", flush=True)
                if out_path:
                    with out_path.open("a") as fh:
                        fh.write(json.dumps({"model": name, "rows": exp["rows"], "job": job,
                                             "result": results[job]}) + "\n")
            if out_path and plan:
                with out_path.open("a") as fh:
                    fh.write(json.dumps({"model": name, "rows": exp["rows"], "job": "predict", "result": plan}) + "\n")
            print("\n".join(summarize(name, exp["rows"], results)), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
