"""Do the amide rotamers of an N-aryl amide average on the NMR time scale at 298 K?

The molecule is INVENTED for this example: 2-fluoro-N-methyl-N-(2-methylphenyl)acetamide.
Tertiary anilides like it exist as E and Z amide rotamers; whether an NMR spectrum shows one
averaged set of signals or two sets depends on how fast the amide C-N bond turns compared
with the shift difference of the exchanging signals. The shift difference used here
(25 Hz for the N-methyl signal on a 400 MHz instrument) is an INVENTED measurement.

Run:  python examples/scan_aryl_amide.py [--method gfn2] [--step 30] [--plot FILE.png]
(a relaxed GFN2 scan at 30 degree steps, both walks on two worker processes, took 2-3
minutes here on a busy two-core machine: about 850 gradient calls)

What to expect: the walk up and the walk down disagree at most angles. One dihedral
(O=C-N-C) is an imperfect coordinate for amide rotation: nitrogen pyramidalizes near the
transition state and the aryl ring and the CH2F group can settle differently on each walk.
The scan reports this as hysteresis and keeps the lower energy at each angle.
"""

from __future__ import annotations

import argparse
import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one engine thread per process

from confpop import kinetics  # noqa: E402
from confpop.execution import local_executor  # noqa: E402
from confpop.molecule import load_molecule  # noqa: E402
from confpop.torsion import rotatable_torsions, scan_torsion  # noqa: E402

SMILES = "FCC(=O)N(C)c1ccccc1C"  # invented example molecule
DELTA_NU_HZ = 25.0  # invented: N-CH3 shift difference between the rotamers at 400 MHz
TEMPERATURE = 298.15


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--method", default="gfn2")
    parser.add_argument("--step", type=float, default=30.0)
    parser.add_argument("--plot", default=None, help="also draw the profile to this PNG")
    args = parser.parse_args()

    mol = load_molecule(SMILES)
    amide = next(t for t in rotatable_torsions(mol) if t.kind == "amide")
    print(f"invented molecule {SMILES}; amide torsion {amide.label} "
          f"(0-based atoms {amide.atoms})")
    with local_executor(2) as pool:
        profile = scan_torsion(mol, amide.atoms, method=args.method, step=args.step,
                               executor=pool)
    print(f"{args.method} relaxed scan, {len(profile.angles)} points, "
          f"{profile.gradient_calls} gradient calls")
    print((profile.minima().round(2) + 0.0).to_string(index=False))
    if profile.hysteresis:
        print("hysteresis (a neighbouring group changed during the scan) at",
              ", ".join(f"{a:g} deg" for a, _ in profile.hysteresis))

    rates = profile.rates(TEMPERATURE, delta_nu_hz=DELTA_NU_HZ)
    print(f"\nbarriers and rates at {TEMPERATURE} K (shift difference {DELTA_NU_HZ:g} Hz):")
    for _, r in rates.iterrows():
        print(f"  {r['from_min']:7.1f} -> {r['to_min']:7.1f} deg over {r['barrier_forward']:5.1f} "
              f"kcal/mol: k = {r['k_forward']:.2e} s^-1, t1/2 = "
              f"{kinetics.format_duration(r['half_life_forward'])}; NMR: {r['exchange_regime']}")

    # The answer. With two minima (E and Z) the bond can turn either way round: both paths
    # run in parallel, so the rate from one rotamer to the other is the sum over paths. The
    # NMR regime compares the mean directional rate with the coalescence rate.
    minima = profile.minima()
    if len(minima) < 2:
        print("\nOnly one minimum along this torsion: nothing to average.")
        return
    a, b = minima["angle"].iloc[0], minima["angle"].iloc[1]
    a_text, b_text = f"{round(a) + 0:d}", f"{round(b) + 0:d}"
    k_ab = rates.loc[rates["from_min"] == a, "k_forward"].sum() + \
        rates.loc[rates["to_min"] == a, "k_reverse"].sum()
    k_ba = rates.loc[rates["from_min"] == b, "k_forward"].sum() + \
        rates.loc[rates["to_min"] == b, "k_reverse"].sum()
    k_mean = 0.5 * (k_ab + k_ba)
    regime = kinetics.exchange_regime(k_mean, DELTA_NU_HZ)
    k_c = kinetics.coalescence_rate(DELTA_NU_HZ)
    print(f"\nDo the rotamers average at {TEMPERATURE:g} K? Between the minima at {a_text} and "
          f"{b_text} deg: k = {k_ab:.2e} and {k_ba:.2e} s^-1 (both paths summed), mean "
          f"{k_mean:.2e} s^-1, against a coalescence rate of {k_c:.0f} s^-1 for "
          f"{DELTA_NU_HZ:g} Hz.")
    if regime == "fast":
        print("Yes: exchange is fast on the NMR time scale; one averaged set of signals.")
    elif regime == "slow":
        print("No: exchange is slow on the NMR time scale; each rotamer gives its own signals, "
              "in the ratio of their populations.")
    else:
        print("Not cleanly: exchange is intermediate; expect broadened lines that sharpen on "
              "heating (a variable-temperature spectrum would show coalescence), and remember "
              "the ±1 kcal/mol uncertainty below shifts k by a factor of ~5 either way.")
    print(profile.note)
    if args.plot:
        from confpop.plot import plot_torsion_profile
        plot_torsion_profile(profile, path=args.plot)
        print(f"profile drawn to {args.plot}")


if __name__ == "__main__":
    main()
