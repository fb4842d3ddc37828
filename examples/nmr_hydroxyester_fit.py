"""Invented scenario: rotamer populations of a beta-hydroxy ester from its vicinal couplings.

Everything here is made up for illustration: the molecule choice (an invented beta-hydroxy
ester, methyl (3S)-4-fluoro-3-hydroxybutanoate, COC(=O)C[C@H](O)CF) and the "measured"
couplings in nmr_hydroxyester_invented_J.csv (column ``source`` says "invented"). No
spectrum was recorded.

The CH2-CH(OH)-CH2F backbone has two CH-CH2 fragments with diastereotopic CH2 protons, so
four couplings report on the two backbone torsions. The script

1. searches the conformers (force field by default so it runs in a minute; pass
   ``--method gfn2`` for the tight-binding ranking),
2. lists the vicinal pairs, the Karplus set each gets and the proton groups,
3. prints the population-averaged couplings at 273, 298 and 323 K with a Monte Carlo
   spread from a 1 kcal/mol energy error,
4. fits the conformer populations to the invented couplings and compares them with the
   Boltzmann populations, and writes a predicted-vs-observed figure.

Run:  python examples/nmr_hydroxyester_fit.py [--method mmff94s] [--figure fit.png]
The same from the command line:
      confpop couplings "COC(=O)C[C@H](O)CF" --method mmff94s -T 273.15 298.15 323.15 \
          --observed examples/nmr_hydroxyester_invented_J.csv
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd


from confpop import nmr, plot
from confpop.pipeline import search

HERE = Path(__file__).resolve().parent
SMILES = "COC(=O)C[C@H](O)CF"  # invented example molecule (see the module docstring)
TEMPERATURES = [273.15, 298.15, 323.15]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--method", default="mmff94s", help="ranking method (default mmff94s)")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--figure", default="nmr_hydroxyester_parity.png")
    args = parser.parse_args()

    ens = search(SMILES, method=args.method, seed=args.seed)
    print(f"{len(ens)} conformers at {ens.level}")

    pairs = nmr.vicinal_pairs(ens.mol)
    print("\nvicinal pairs (0-based H indices) and the Karplus set each gets:")
    print(pairs[["label", "group", "fragment", "parameter_set", "reason"]].to_string(index=False))

    print("\npopulation-averaged couplings (Hz), one row per group pair:")
    avg = nmr.average_couplings(ens, TEMPERATURES, by="group")
    print(avg.drop(columns=["atoms_a", "atoms_b"]).to_string(index=False, float_format="%.2f"))

    spread = nmr.coupling_spread(ens, [298.15], by="group", energy_sigma=1.0, n_samples=500, seed=0)
    print("\nspread at 298.15 K from a 1 kcal/mol per-conformer energy error (Hz):")
    print(spread[["group", "value", "p05", "p95"]].to_string(index=False, float_format="%.2f"))

    observed = pd.read_csv(HERE / "nmr_hydroxyester_invented_J.csv")  # invented numbers
    fit = nmr.fit_populations(ens, observed, temperature=298.15, seed=0)
    print(f"\nfit at 298.15 K to {fit.n_observations} invented couplings: chi2 {fit.chi2:.2f} "
          f"(Boltzmann: {fit.chi2_boltzmann:.2f}), rms deviation {fit.rms_deviation:.2f} Hz")
    print(fit.to_frame().to_string(float_format="%.3f"))
    print(fit.residuals[["atom_a", "atom_b", "group", "observed", "predicted", "boltzmann"]]
          .to_string(index=False, float_format="%.2f"))
    if fit.minimal_subset:
        print(f"smallest conformer set explaining the data within the noise: {list(fit.minimal_subset)}")
    if fit.warning:
        print("warning:", fit.warning)
    plot.coupling_parity_plot(fit, path=args.figure)
    print(f"wrote {args.figure}")


if __name__ == "__main__":
    main()
