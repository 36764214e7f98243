"""Makes the invented demo data set in data/demo/ (see data/README.md).

Scenario (invented for the demo; the numbers are not literature values): nickel(II) in a
lithium perchlorate brine forms NiBr+ and NiBr2 with bromide. Three series at different bromide
levels are measured from 5 to 90 degC. The solutions are made up at 25 degC, so their molar
concentrations fall with the solvent density on heating (Kell 1975 water density).

This is an independent forward model (numpy + scipy brentq), deliberately not isosbestic's own
code, so that fits on these files test isosbestic against something outside the project.

Run from the repository root:  python3 data/demo/make_demo.py
Needs numpy and scipy. Deterministic (fixed seed).
"""
import json
import os

import numpy as np
from scipy.optimize import brentq

R = 8.314462618  # J/(mol K), CODATA 2018
T_REF = 298.15
HERE = os.path.dirname(os.path.abspath(__file__))

# Invented thermodynamic parameters at T_ref (log10 beta, dH in J/mol), van 't Hoff form.
TRUTH = {
    "NiBr": {"log_beta_ref": 0.35, "dh_ref": 14.0e3},
    "NiBr2": {"log_beta_ref": -0.10, "dh_ref": 38.0e3},
}


def log_beta(species, t_k):
    p = TRUTH[species]
    return p["log_beta_ref"] - p["dh_ref"] / (R * np.log(10.0)) * (1.0 / t_k - 1.0 / T_REF)


def kell_density(t_c):
    """Kell, J. Chem. Eng. Data 20 (1975) 97, Eq. 16, kg/m3."""
    t = t_c
    num = (999.83952 + 16.945176 * t - 7.9870401e-3 * t**2 - 46.170461e-6 * t**3
           + 105.56302e-9 * t**4 - 280.54253e-12 * t**5)
    return num / (1.0 + 16.879850e-3 * t)


def band(wl, centre, width, height):
    return height * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def pure_spectra(wl):
    """Invented molar absorptivities, L/(mol cm): the aqua ion absorbs weakly."""
    ni = band(wl, 395.0, 28.0, 5.2) + band(wl, 720.0, 60.0, 2.1) + band(wl, 655.0, 30.0, 1.2)
    nibr = band(wl, 410.0, 32.0, 14.0) + band(wl, 745.0, 65.0, 6.5)
    nibr2 = band(wl, 430.0, 35.0, 32.0) + band(wl, 660.0, 45.0, 48.0) + band(wl, 770.0, 55.0, 25.0)
    return np.stack([ni, nibr, nibr2], axis=1)  # wavelengths x species


def speciate(m_t, l_t, t_k):
    b1 = 10.0 ** log_beta("NiBr", t_k)
    b2 = 10.0 ** log_beta("NiBr2", t_k)

    def resid(l):
        den = 1.0 + b1 * l + b2 * l * l
        return l + m_t * (b1 * l + 2.0 * b2 * l * l) / den - l_t

    l = brentq(resid, 0.0, l_t, xtol=1e-15, rtol=1e-14)
    m = m_t / (1.0 + b1 * l + b2 * l * l)
    return np.array([m, b1 * m * l, b2 * m * l * l]), l


def main():
    rng = np.random.default_rng(20261201)
    wl = np.arange(350.0, 850.0 + 1e-9, 2.0)
    eps = pure_spectra(wl)
    temps_c = np.arange(5.0, 90.0 + 1e-9, 5.0)
    series = [("Br-0.5", 0.040, 0.50), ("Br-1.5", 0.040, 1.50), ("Br-3.0", 0.040, 3.00)]
    path_cm = 1.0
    noise_au = 4e-4
    rho_prep = kell_density(25.0)

    ids, rows, spectra = [], [], []
    for label, m_nom, l_nom in series:
        for t_c in temps_c:
            sid = f"{label}_{int(round(t_c)):02d}C"
            t_k = t_c + 273.15
            f = kell_density(t_c) / rho_prep  # thermal expansion of the solution
            c, _ = speciate(m_nom * f, l_nom * f, t_k)
            a = path_cm * eps @ c
            a += 2e-3 * rng.standard_normal()  # small per-spectrum offset (cell positioning)
            a += noise_au * rng.standard_normal(wl.size)
            ids.append(sid)
            rows.append([sid, label, f"{t_c:.1f}", f"{path_cm:.3f}", f"{m_nom:.6g}", f"{l_nom:.6g}"])
            spectra.append(a)

    with open(os.path.join(HERE, "spectra.csv"), "w") as fh:
        fh.write("wavelength_nm," + ",".join(ids) + "\n")
        for j, w in enumerate(wl):
            fh.write(f"{w:.1f}," + ",".join(f"{s[j]:.6f}" for s in spectra) + "\n")
    with open(os.path.join(HERE, "samples.csv"), "w") as fh:
        fh.write("sample_id,series,temperature_C,path_cm,Ni_M,Br_M\n")
        for r in rows:
            fh.write(",".join(r) + "\n")

    with open(os.path.join(HERE, "samples_jcamp.csv"), "w") as fh:
        fh.write("sample_id,series,temperature_C,path_cm,Ni_M,Br_M\n")
        for r in rows:
            if r[1] == "Br-0.5":
                fh.write(",".join(r) + "\n")

    # The lowest-bromide series also as one JCAMP-DX file per sample (AFFN, X++(Y..Y)).
    jdir = os.path.join(HERE, "jcamp")
    os.makedirs(jdir, exist_ok=True)
    for sid, s in zip(ids, spectra):
        if not sid.startswith("Br-0.5"):
            continue
        with open(os.path.join(jdir, f"{sid}.jdx"), "w") as fh:
            fh.write(f"##TITLE={sid}\n##JCAMP-DX=4.24\n##DATA TYPE=UV/VIS SPECTRUM\n")
            fh.write("##ORIGIN=isosbestic demo generator\n##OWNER=public domain\n")
            fh.write("##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##XFACTOR=1\n##YFACTOR=0.000001\n")
            fh.write(f"##FIRSTX={wl[0]:.1f}\n##LASTX={wl[-1]:.1f}\n##DELTAX=2\n##NPOINTS={wl.size}\n")
            fh.write(f"##FIRSTY={s[0]:.6f}\n##XYDATA=(X++(Y..Y))\n")
            for k in range(0, wl.size, 8):
                ys = " ".join(str(int(round(v * 1e6))) for v in s[k:k + 8])
                fh.write(f"{wl[k]:.1f} {ys}\n")
            fh.write("##END=\n")

    # An invented K(T) table for the van 't Hoff demo: log10 beta1 of NiBr+ at 8 temperatures
    # with sigma = 0.01 (as a lab might have from earlier measurements).
    with open(os.path.join(HERE, "k_table.csv"), "w") as fh:
        fh.write("temperature_C,log10_K,sigma_log10_K\n")
        for t_c in np.linspace(10.0, 80.0, 8):
            v = log_beta("NiBr", t_c + 273.15) + 0.01 * rng.standard_normal()
            fh.write(f"{t_c:.1f},{v:.4f},0.01\n")

    truth = {"scenario": "invented: Ni(II)-bromide in LiClO4 brine (demo only)",
             "T_ref_K": T_REF, "law": "van 't Hoff", "parameters": TRUTH,
             "noise_au": noise_au, "offset_sd_au": 2e-3,
             "concentration_basis": "made up at 25 degC; thermal expansion by Kell water density",
             "species": ["Ni", "NiBr", "NiBr2"]}
    with open(os.path.join(HERE, "truth.json"), "w") as fh:
        json.dump(truth, fh, indent=1)


if __name__ == "__main__":
    main()
