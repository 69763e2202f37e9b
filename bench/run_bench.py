"""Benchmark starlines against specutils, the I/O floor and itself on more cores.

Run by hand (never part of the test suite)::

    python bench/run_bench.py --n 200              # costs, ratios, start-up, EWs, 2 workers
    python bench/run_bench.py --memory-check 10000 # memory flat in N (engine, 2 workers)
    python bench/run_bench.py --profile 40         # cProfile hot spots of analyse_file

Each workload runs as a whole child process (``bench/workloads.py``); the parent measures
its wall time and peak RSS (``os.wait4``: the largest process of the child's tree). The
spectra are written to a temporary folder by ``bench/make_spectra.py`` (seeded).
See bench/README.md for the figures measured on the project machine.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)

#: Goals (see bench/README.md): name -> (threshold, "min" or "max").
GOALS = {
    "speed vs specutils (straightforward)": (30.0, "min"),
    "speed vs specutils (tuned)": (10.0, "min"),
    "cost / I/O floor": (20.0, "max"),
    "CLI start-up [s]": (1.5, "max"),
    "parallel efficiency, 2 workers": (0.85, "min"),
    "peak RSS [MB]": (300.0, "max"),
}

def run_child(mode: str, listfile: str, workdir: str, *extra: str) -> dict:
    """Run one workload as a process; return its JSON plus wall time and peak RSS."""
    out = os.path.join(workdir, f"{mode}.json")
    cmd = [sys.executable, os.path.join(HERE, "workloads.py"), mode, listfile, out, *extra]
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - start
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"workload {mode} failed with exit code {proc.returncode}")
    with open(out) as fh:
        data = json.load(fh)
    data.update(wall=wall, peak_rss_mb=usage.ru_maxrss / 1024.0,
                cpu_s=usage.ru_utime + usage.ru_stime)
    return data


def time_command(cmd: list[str], repeat: int = 5) -> float:
    """Median wall time (s) of a command run ``repeat`` times."""
    walls = []
    for _ in range(repeat):
        start = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
        walls.append(time.perf_counter() - start)
    return statistics.median(walls)


def per_spectrum(data: dict) -> dict:
    """Per-spectrum costs (ms): median of the loop, mean incl. warm-up, whole process / N."""
    times = data.get("times") or []
    n = data["n"]
    return {
        "median_ms": 1e3 * statistics.median(times) if times else float("nan"),
        "mean_ms": 1e3 * data["t_loop"] / n,
        "process_ms": 1e3 * data["wall"] / n,
        "import_s": data["t_import"],
        "peak_rss_mb": data["peak_rss_mb"],
    }


def ew_agreement(starl: dict, flat: dict, naive: dict, truth: dict) -> dict:
    """Median relative EW differences per check line (lines with a model EW >= 0.1 A).

    ``flat`` is specutils with the true flat continuum over +-12 A (where specutils is
    right); ``naive`` the straightforward pipeline; ``model`` the synthetic_ews truth.
    """
    out = {}
    for ident in next(iter(flat.values()), {}):
        rel = {"starlines_vs_specutils": [], "starlines_vs_model": [],
               "specutils_vs_model": [], "pipeline_vs_model": []}
        for name, row in starl.items():
            ew, ref = row.get(ident), flat.get(name, {}).get(ident)
            true = truth[name]["ews"].get(ident)
            if ew is None or ref is None or not true or true < 0.1:
                continue  # not measured, or too weak for a relative difference
            rel["starlines_vs_specutils"].append((ew - ref) / ref)
            rel["starlines_vs_model"].append((ew - true) / true)
            rel["specutils_vs_model"].append((ref - true) / true)
            if ident in naive.get(name, {}):
                rel["pipeline_vs_model"].append((naive[name][ident] - true) / true)
        if rel["starlines_vs_specutils"]:
            out[ident] = {"n": len(rel["starlines_vs_specutils"]),
                          **{k: statistics.median(v) if v else float("nan")
                             for k, v in rel.items()}}
    return out


def make_data(tmp: str, n: int, distinct: int | None = None) -> tuple[str, dict]:
    """Write the spectra in a child process (keeps this driver small: children inherit
    its peak RSS at fork); return the path list file and the truth table."""
    folder = os.path.join(tmp, "spectra")
    cmd = [sys.executable, os.path.join(HERE, "make_spectra.py"), folder, str(n)]
    start = time.perf_counter()
    subprocess.run(cmd + ([str(distinct)] if distinct else []), check=True)
    print(f"wrote {n} spectra in {time.perf_counter() - start:.1f} s", flush=True)
    with open(os.path.join(folder, "truth.json")) as fh:
        truth = json.load(fh)
    return os.path.join(folder, "paths.txt"), truth


def startup() -> dict:
    exe = os.path.join(os.path.dirname(sys.executable), "starlines")
    return {
        "starlines --help": time_command([exe, "--help"]),
        "import starlines.cli": time_command([sys.executable, "-c", "import starlines.cli"]),
        "python -c pass": time_command([sys.executable, "-c", "pass"]),
    }


def main_bench(args) -> dict:

    report: dict = {"n": args.n, "workers": args.workers, "cores": os.cpu_count(),
                    "load_before": os.getloadavg()}
    with tempfile.TemporaryDirectory(prefix="starlines-bench-") as tmp:
        listfile, truth = make_data(tmp, args.n)
        runs = {}
        for mode in ("io", "starlines", "specutils-tuned", "specutils", "flat-check"):
            print(f"running {mode} ...", flush=True)
            runs[mode] = run_child(mode, listfile, tmp, "--lines")
        report["costs"] = {m: per_spectrum(d) for m, d in runs.items() if m != "flat-check"}
        report["ew"] = ew_agreement(runs["starlines"]["ews"], runs["flat-check"]["ews"],
                                    runs["specutils"]["ews"], truth)
        print("running the engines (serial, then the pool) ...", flush=True)
        serial = run_child("engine", listfile, tmp, "--workers", "1")
        pool = run_child("engine", listfile, tmp, "--workers", str(args.workers))
        report["parallel"] = parallel_figures(serial, pool, args.workers)
    report["startup"] = startup()
    report["load_after"] = os.getloadavg()
    return report


def parallel_figures(serial: dict, pool: dict, workers: int) -> dict:
    """End-to-end efficiency T1 / (W T_W), and steady state from the second half of the
    results (after every process has warmed up: imports, grids, trained model)."""
    n = serial["n"]
    t1, tw = serial["t_loop"], pool["t_loop"]

    def second_half(stamps):
        h = len(stamps) // 2
        return (stamps[-1] - stamps[h]) / (len(stamps) - 1 - h)

    s1, sw = second_half(serial["stamps"]), second_half(pool["stamps"])
    return {
        "serial_s": t1, "pool_s": tw, "pool_first_result_s": pool["first_result"],
        "serial_first_result_s": serial["first_result"],
        "efficiency": t1 / (workers * tw), "efficiency_steady": s1 / (workers * sw),
        # load-independent: CPU seconds of the whole serial process tree over the pool's
        # (workers included); < 1 means the pool spends CPU on overhead or warm-ups
        "cpu_efficiency": serial["cpu_s"] / pool["cpu_s"],
        "serial_cpu_s": serial["cpu_s"], "pool_cpu_s": pool["cpu_s"],
        "throughput_per_s": n / tw, "steady_throughput_per_s": 1.0 / sw,
        "pool_peak_rss_mb": pool["peak_rss_mb"],
        "per_spectrum_serial_ms": 1e3 * s1, "per_spectrum_pool_ms": 1e3 * sw,
    }


def memory_check(args) -> dict:
    with tempfile.TemporaryDirectory(prefix="starlines-mem-") as tmp:
        listfile, _ = make_data(tmp, args.memory_check, distinct=min(100, args.memory_check))
        data = run_child("memory", listfile, tmp, "--workers", str(args.workers))
    return {"n": args.memory_check, "workers": args.workers, "wall_s": data["wall"],
            "driver_rss_mb_at": data["rss_samples"], "peak_rss_mb": data["peak_rss_mb"]}


def profile(args) -> str:
    with tempfile.TemporaryDirectory(prefix="starlines-prof-") as tmp:
        listfile, _ = make_data(tmp, args.profile)
        data = run_child("profile", listfile, tmp)
    return data["text"]


def print_report(r: dict) -> None:
    c = r["costs"]
    print(f"\n{r['n']} spectra, {r['cores']} cores, load average before "
          f"{r['load_before'][0]:.2f}, after {r['load_after'][0]:.2f}")
    print(f"{'workload':18s} {'median ms':>10s} {'mean ms':>9s} {'process ms':>11s} "
          f"{'import s':>9s} {'peak MB':>8s}")
    for mode, v in c.items():
        print(f"{mode:18s} {v['median_ms']:10.2f} {v['mean_ms']:9.2f} {v['process_ms']:11.2f}"
              f" {v['import_s']:9.2f} {v['peak_rss_mb']:8.0f}")
    sl = c["starlines"]["median_ms"]
    p = r["parallel"]
    got = {
        "speed vs specutils (straightforward)": c["specutils"]["median_ms"] / sl,
        "speed vs specutils (tuned)": c["specutils-tuned"]["median_ms"] / sl,
        "cost / I/O floor": sl / c["io"]["median_ms"],
        "CLI start-up [s]": r["startup"]["starlines --help"],
        "parallel efficiency, 2 workers": p["efficiency_steady"],
        "peak RSS [MB]": max(c["starlines"]["peak_rss_mb"], p["pool_peak_rss_mb"]),
    }
    print("\ngoal                                   measured     goal   met")
    for name, value in got.items():
        goal, kind = GOALS[name]
        ok = value >= goal if kind == "min" else value <= goal
        sign = ">=" if kind == "min" else "<="
        print(f"{name:38s} {value:9.2f}  {sign}{goal:6.2f}   {'yes' if ok else 'NO'}")
    print(f"\nengines: serial {p['serial_s']:.1f} s, {r['workers']} workers {p['pool_s']:.1f} s "
          f"(first result after {p['pool_first_result_s']:.1f} s); efficiency "
          f"{p['efficiency']:.2f} end to end, {p['efficiency_steady']:.2f} steady state; "
          f"{p['steady_throughput_per_s']:.1f} spectra/s steady; serial "
          f"{p['per_spectrum_serial_ms']:.0f} ms, pool {p['per_spectrum_pool_ms']:.0f} ms "
          "per spectrum (steady)")
    print(f"CPU time: serial {p['serial_cpu_s']:.1f} s, pool {p['pool_cpu_s']:.1f} s "
          f"(CPU efficiency {p['cpu_efficiency']:.2f}; wall-time efficiency needs an idle "
          "machine: compare the load averages)")
    for k, v in r["startup"].items():
        print(f"start-up  {k:24s} {v:.3f} s")
    print("\nEW cross-check, median relative difference (specutils = true flat continuum, "
          "+-12 A; model = synthetic_ews; pipeline = straightforward specutils)")
    for ident, v in r["ew"].items():
        print(f"  {ident:9s} n={v['n']:4d}  starlines-specutils {v['starlines_vs_specutils']:+.3f}"
              f"  starlines-model {v['starlines_vs_model']:+.3f}"
              f"  specutils-model {v['specutils_vs_model']:+.3f}"
              f"  pipeline-model {v['pipeline_vs_model']:+.3f}")
    allrel = [v["starlines_vs_specutils"] for v in r["ew"].values()]
    if allrel:
        print(f"  median over lines: starlines vs specutils {statistics.median(allrel):+.3f}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=200, help="number of spectra (default 200)")
    ap.add_argument("--workers", type=int, default=2, help="pool size for the parallel run")
    ap.add_argument("--memory-check", type=int, metavar="N",
                    help="only run the engine over N files and report memory")
    ap.add_argument("--profile", type=int, metavar="N", help="only profile N spectra")
    ap.add_argument("--json", metavar="FILE", help="also write the figures as JSON")
    args = ap.parse_args(argv)
    if args.profile:
        print(profile(args))
        return 0
    if args.memory_check:
        r = memory_check(args)
        print(json.dumps(r, indent=1))
    else:
        r = main_bench(args)
        print_report(r)
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(r, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
