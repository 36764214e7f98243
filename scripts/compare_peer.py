#!/usr/bin/env python3
"""Times isosbestic's global fit against the Python/scipy peer on identical files.

Writes simulated 1:4 data sets (M + 4L <=> ML4, one series, weak free metal) in the peer's
folder format into a temporary folder, runs the peer (plain and --compress, one BLAS thread,
median of --repeats runs of its reported fit + standard-error time) and isosbestic
(`cargo bench --bench hard` with ISOSBESTIC_PEER_DATA, one thread, median time), and prints a
table with the ratio peer/isosbestic, of the medians and of the fastest runs (on a shared machine
the fastest run is the one least disturbed by other load; the medians of both scatter with it). With --memory it also reads the peak resident memory of
one isosbestic fit on a large set (/usr/bin/time -v) and expresses the part above loading in
copies of D.

Usage: python3 scripts/compare_peer.py [--sizes 100x10,300x30,...] [--repeats 3] [--memory]
       [--peer /work/shared/peers/peer_fit.py] [--keep DIR]
"""

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile

import numpy as np

R = 8.314462618
LOG_BETA = 4.0
DH = 30_000.0
T_REF = 298.15
M_TOTAL = 0.004
L_TOTAL = 0.1
NOISE = 1e-3
ALL_SIZES = [(w, t) for w in (100, 300, 1000, 3000) for t in (10, 30, 100)]


def gauss(wl, centre, width, height):
    return height * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def complex_concentration(t_k):
    """[ML4] per temperature: bisection on the free-ligand mass balance (monotone in l)."""
    beta = 10.0**LOG_BETA * np.exp(-DH / R * (1.0 / t_k - 1.0 / T_REF))
    lo = np.zeros_like(t_k)
    hi = np.full_like(t_k, L_TOTAL)
    for _ in range(200):
        l = 0.5 * (lo + hi)
        m = M_TOTAL / (1.0 + beta * l**4)
        excess = l + 4.0 * beta * m * l**4 - L_TOTAL
        hi = np.where(excess > 0, l, hi)
        lo = np.where(excess > 0, lo, l)
    l = 0.5 * (lo + hi)
    m = M_TOTAL / (1.0 + beta * l**4)
    return m, beta * m * l**4


def write_set(folder, n_wl, n_t, seed):
    os.makedirs(folder, exist_ok=True)
    wl = np.linspace(400.0, 700.0, n_wl)
    t_k = 273.15 + np.linspace(5.0, 80.0, n_t)
    m, c = complex_concentration(t_k)
    eps_m = gauss(wl, 520.0, 50.0, 8.0)
    eps_c = gauss(wl, 600.0, 45.0, 120.0) + gauss(wl, 470.0, 30.0, 40.0)
    d = np.outer(m, eps_m) + np.outer(c, eps_c)
    d += np.random.default_rng(seed).normal(0.0, NOISE, d.shape)
    ids = ["s%03d" % i for i in range(n_t)]
    with open(os.path.join(folder, "spectra.csv"), "w") as f:
        f.write("wavelength_nm," + ",".join(ids) + "\n")
        for j in range(n_wl):
            f.write("%.6f," % wl[j] + ",".join("%.8e" % v for v in d[:, j]) + "\n")
    with open(os.path.join(folder, "samples.csv"), "w") as f:
        f.write("sample_id,series,temperature_K,path_cm,Mt_M,Lt_M\n")
        for i in range(n_t):
            f.write("%s,1,%.4f,1.0,%g,%g\n" % (ids[i], t_k[i], M_TOTAL, L_TOTAL))
    model = {
        "metal": "M",
        "ligand": "L",
        "complexes": [{"name": "ML4", "n": 4}],
        "absorbing_species": ["M", "ML4"],
        "non_absorbing_species": ["L"],
        "weakly_absorbing_species": {"M": "peak eps below ~20 L/mol/cm"},
        "thermo_model": "vant_hoff",
        "Tref_K": T_REF,
        "concentration_basis": "as_given_at_measurement_temperature",
        "baseline": "none",
        "spectra_temperature_dependence": "none",
    }
    with open(os.path.join(folder, "model.json"), "w") as f:
        json.dump(model, f, indent=1)


def one_thread_env():
    env = dict(os.environ)
    for v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "RAYON_NUM_THREADS"):
        env[v] = "1"
    return env


def time_peer(peer, folder, compress, repeats):
    """Median and fastest fit + standard-error time, and the peer's dH of ML4 with its standard
    error (kJ/mol)."""
    times = []
    for _ in range(repeats):
        cmd = [sys.executable, peer, folder] + (["--compress"] if compress else [])
        out = subprocess.run(cmd, capture_output=True, text=True, env=one_thread_env(), check=True).stdout
        hit = re.search(r"fit wall time ([0-9.]+) s .*SE computation ([0-9.]+) s", out)
        if not hit:
            raise SystemExit("cannot read the peer's time from:\n" + out)
        times.append(float(hit.group(1)) + float(hit.group(2)))
        dh = re.search(r"dH_ML4_kJ\s+(\S+)\s+(\S+)", out)
    return float(np.median(times)), float(min(times)), float(dh.group(1)), float(dh.group(2))


def time_isosbestic(root, repo, residual_svd=True):
    env = one_thread_env()
    env["ISOSBESTIC_PEER_DATA"] = root
    if not residual_svd:
        env["ISOSBESTIC_RESIDUAL_SVD"] = "0"
    run = subprocess.run(
        ["cargo", "bench", "--quiet", "--bench", "hard"], cwd=repo, capture_output=True, text=True, env=env, check=True
    )
    fastest = {m.group(1): float(m.group(2)) for m in re.finditer(r"^PEER_FASTEST (\S+) (\S+)", run.stderr, re.M)}
    return {
        m.group(1): (float(m.group(2)), fastest.get(m.group(1), float("nan")), float(m.group(3)), float(m.group(4)))
        for m in re.finditer(r"^PEER_COMPARE (\S+) (\S+) (\S+) (\S+)$", run.stdout, re.M)
    }


def bench_binary(repo):
    out = subprocess.run(
        ["cargo", "bench", "--bench", "hard", "--no-run"], cwd=repo, capture_output=True, text=True, check=True
    ).stderr
    hit = re.search(r"\((\S*hard-[0-9a-f]+)\)", out)
    if not hit:
        raise SystemExit("cannot find the bench executable in:\n" + out)
    return os.path.join(repo, hit.group(1))


def max_rss_kb(binary, mode):
    env = one_thread_env()
    env["ISOSBESTIC_MEMORY"] = mode
    err = subprocess.run(["/usr/bin/time", "-v", binary], capture_output=True, text=True, env=env, check=True).stderr
    return int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", err).group(1))


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", default=",".join("%dx%d" % s for s in ALL_SIZES), help="wavelengths x temperatures")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--peer", default="/work/shared/peers/peer_fit.py")
    ap.add_argument("--memory", action="store_true", help="peak memory of one fit on 3000 wavelengths x 751 spectra")
    ap.add_argument("--no-speed", action="store_true", help="skip the timings")
    ap.add_argument("--keep", help="write the data sets here instead of a temporary folder")
    args = ap.parse_args()
    repo = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    sizes = [tuple(int(v) for v in s.split("x")) for s in args.sizes.split(",")]
    root = args.keep or tempfile.mkdtemp(prefix="isosbestic-peer-")
    names = []
    for k, (w, t) in enumerate(sizes):
        name = "nwl%04d-nT%03d" % (w, t)
        write_set(os.path.join(root, name), w, t, seed=100 + k)
        names.append(name)
    if args.no_speed:
        sizes = names = []
    ours = time_isosbestic(root, repo) if names else {}
    # the fit and its standard errors only, without the residual-structure SVD (the peer's
    # reported time covers its fit and standard errors, no diagnostics)
    lean = time_isosbestic(root, repo, residual_svd=False) if names else {}
    print(
        "| wavelengths x temperatures | peer plain | peer --compress | isosbestic | ratio (fastest peer / isosbestic)"
        " | fastest runs: peer / isosbestic | ratio of fastest runs | isosbestic fit + SE only (median / fastest)"
        " | ratios, fit + SE only | dH peer, kJ/mol | dH isosbestic, kJ/mol |"
    )
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    worst = best_worst = lean_worst = float("inf")
    for name, (w, t) in zip(names, sizes):
        folder = os.path.join(root, name)
        plain, plain_min, dh_p, se_p = time_peer(args.peer, folder, False, args.repeats)
        comp, comp_min, _, _ = time_peer(args.peer, folder, True, args.repeats)
        mine, mine_min, dh_i, se_i = ours[name]
        ratio = min(plain, comp) / mine
        ratio_min = min(plain_min, comp_min) / mine_min
        lean_med, lean_min, _, _ = lean[name]
        lean_ratio, lean_ratio_min = min(plain, comp) / lean_med, min(plain_min, comp_min) / lean_min
        worst = min(worst, ratio)
        best_worst = min(best_worst, ratio_min)
        lean_worst = min(lean_worst, lean_ratio, lean_ratio_min)
        print(
            "| %d x %d | %.4f s | %.4f s | %.5f s | %.1f | %.4f s / %.5f s | %.1f | %.5f s / %.5f s | %.1f / %.1f"
            " | %.3f ± %.3f | %.3f ± %.3f |"
            % (w, t, plain, comp, mine, ratio, min(plain_min, comp_min), mine_min, ratio_min, lean_med, lean_min,
               lean_ratio, lean_ratio_min, dh_p, se_p, dh_i, se_i)
        )
    if names:
        print(
            "smallest ratio: %.1f of medians, %.1f of fastest runs; fit + SE only: %.1f (target >= 20)"
            % (worst, best_worst, lean_worst)
        )
    if args.memory:
        # simulated in the bench binary (CSV parsing would dominate the peak otherwise)
        binary = bench_binary(repo)
        build_kb = max_rss_kb(binary, "build")
        fit_kb = max_rss_kb(binary, "fit")
        d_kb = 3000 * 751 * 8 / 1024
        print(
            "peak RSS (3000 wavelengths x 751 spectra): data %.1f MB, data + fit %.1f MB; "
            "the fit adds %.2f copies of D (D = %.1f MB)"
            % (build_kb / 1024, fit_kb / 1024, (fit_kb - build_kb) / d_kb, d_kb / 1024)
        )


if __name__ == "__main__":
    main()
