"""Populations fitted to couplings and NOE distances (confpop.nmr.fit), the figures and the
``confpop couplings`` command.

The data are generated here from known populations with the package's own forward model,
so these tests check the inversion (recovery, noise behaviour, identifiability), not the
Karplus equation (tests/test_nmr_karplus.py and test_nmr_couplings.py do that).
"""

import json

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdForceFieldHelpers as FF
from rdkit.Chem import rdMolTransforms

from nmr_molecules import rotamers

from confpop.ensemble import Ensemble
from confpop.errors import InputError
from confpop.nmr import couplings, fit_populations, group_couplings, noe_distances, read_observations
from reference_values import value as refval


TRUTH = np.array([0.6, 0.3, 0.1])


@pytest.fixture(scope="module")
def butanol():
    # (S)-butan-2-ol, the three staggered rotamers about C2-C3 (atoms 0-1-2-3)
    mol, e = rotamers("CC[C@H](C)O", (0, 1, 2, 3), [60, 180, 300])
    return Ensemble.from_mol(mol, energies=e, unit="kcal/mol")


@pytest.fixture(scope="module")
def synthetic(butanol):
    """Group-averaged couplings at TRUTH: {(a, b): J}."""
    table = group_couplings(couplings(butanol))
    j = table[[0, 1, 2]].to_numpy() @ TRUTH
    return {(row.atoms_a[0], row.atoms_b[0]): float(v) for row, v in zip(table.itertuples(), j)}


def test_recovers_known_populations(butanol, synthetic):
    fit = fit_populations(butanol, synthetic, n_bootstrap=50, seed=1)
    np.testing.assert_allclose(fit.populations.to_numpy(), TRUTH, atol=0.02)
    assert fit.populations.sum() == pytest.approx(1.0, abs=1e-12)
    assert fit.chi2 == pytest.approx(0.0, abs=1e-6)
    assert fit.rms_deviation == pytest.approx(0.0, abs=1e-3)
    assert fit.warning == ""
    assert list(fit.residuals.columns) == ["kind", "atom_a", "atom_b", "group", "observed",
                                           "predicted", "boltzmann", "residual", "sigma", "unit"]
    # implied free energies: G_i - G_j = -RT ln(p_i / p_j) (degeneracy 1) [C]
    rt = refval("gas_constant_kcal") * 298.15  # R in kcal/(mol K), CODATA 2022
    expected = -rt * np.log(fit.populations.to_numpy() / fit.populations.max())
    np.testing.assert_allclose(fit.free_energies.to_numpy(), expected, atol=1e-9)
    assert fit.free_energies.min() == 0.0


def test_noise_degrades_gracefully(butanol, synthetic):
    # error grows with the noise, and the parametric bootstrap std covers the truth
    errors = {}
    covered = 0
    trials = 0
    for noise in (0.0, 0.2, 0.5, 1.0):
        errs = []
        for seed in range(6):
            rng = np.random.default_rng(100 + seed)
            noisy = {k: v + rng.normal(0.0, noise) for k, v in synthetic.items()}
            fit = fit_populations(butanol, noisy, sigma=max(noise, 0.05), n_bootstrap=60, seed=seed)
            err = np.abs(fit.populations.to_numpy() - TRUTH)
            errs.append(err.max())
            if noise > 0:
                trials += 3
                covered += int(np.sum(err <= 3.0 * fit.population_std.to_numpy() + 1e-9))
        errors[noise] = float(np.mean(errs))
    assert errors[0.0] == pytest.approx(0.0, abs=0.02)
    assert errors[0.0] < errors[0.2] < errors[0.5] < errors[1.0]
    assert errors[0.5] < 0.35  # still informative at a typical Karplus error
    assert covered / trials >= 0.9


def test_equivalent_protons_match_the_group_average(butanol, synthetic):
    # observing the methyl coupling via any methyl proton gives the same fit
    key = next(k for k in synthetic if k[0] == 5)   # a (H5..H7 methyl, H8/H9) coupling
    other = {(7 if a == 5 else a, b): v for (a, b), v in synthetic.items()}
    f1 = fit_populations(butanol, synthetic, n_bootstrap=0)
    f2 = fit_populations(butanol, other, n_bootstrap=0)
    np.testing.assert_allclose(f1.populations, f2.populations, atol=1e-12)
    assert key in synthetic


def test_underdetermined_fit_says_so(butanol, synthetic):
    # one rotamer-sensitive coupling + the sum rule cannot fix three populations
    one = {(8, 10): synthetic[(8, 10)]}
    fit = fit_populations(butanol, one, n_bootstrap=20)
    assert "underdetermined" in fit.warning
    assert fit.minimal_subset is not None and 1 <= len(fit.minimal_subset) <= 2
    assert fit.minimal_subset_chi2 <= 3.85  # chi2 95 % point for 1 degree of freedom [C]
    # the fitted populations reproduce the observation even though they are not unique
    assert fit.residuals["residual"].abs().max() < 0.05


def test_zero_population_gives_infinite_free_energy(butanol, synthetic):
    table = group_couplings(couplings(butanol))
    truth = np.array([0.7, 0.3, 0.0])
    obs = {(r.atoms_a[0], r.atoms_b[0]): float(v)
           for r, v in zip(table.itertuples(), table[[0, 1, 2]].to_numpy() @ truth)}
    fit = fit_populations(butanol, obs, n_bootstrap=0)
    np.testing.assert_allclose(fit.populations.to_numpy(), truth, atol=0.02)
    zero = fit.populations.to_numpy() == 0.0
    assert np.isinf(fit.free_energies.to_numpy()[zero]).all()
    assert np.isfinite(fit.free_energies.to_numpy()[~zero]).all()


def test_prior_pulls_towards_boltzmann(butanol, synthetic):
    one = {(8, 10): synthetic[(8, 10)]}
    fit = fit_populations(butanol, one, prior="boltzmann", prior_weight=1e6, n_bootstrap=0)
    np.testing.assert_allclose(fit.populations, fit.boltzmann, atol=1e-3)
    custom = pd.Series({0: 0.2, 1: 0.2, 2: 0.6})
    fit = fit_populations(butanol, one, prior=custom, prior_weight=1e6, n_bootstrap=0)
    np.testing.assert_allclose(fit.populations, custom.to_numpy(), atol=1e-3)


def test_noe_observations_join_the_fit(butanol, synthetic):
    pops = pd.DataFrame({298.15: TRUTH}, index=[0, 1, 2])
    noe = noe_distances(butanol, 298.15, pairs=[(5, 10), (5, 11)], populations=pops)
    obs = {("J", 8, 10): synthetic[(8, 10)]}
    for row in noe.itertuples():
        obs[("noe", row.atom_a, row.atom_b)] = (float(noe.loc[row.Index, 298.15]), 0.05)
    fit = fit_populations(butanol, obs, n_bootstrap=0)
    np.testing.assert_allclose(fit.populations.to_numpy(), TRUTH, atol=0.02)
    assert set(fit.residuals["unit"]) == {"Hz", "angstrom"}
    assert fit.rms_distance == pytest.approx(0.0, abs=1e-3)


def test_dataframe_input_matches_dict(butanol, synthetic):
    frame = pd.DataFrame([{"atom_a": a, "atom_b": b, "J_hz": v, "sigma_hz": 0.5}
                          for (a, b), v in synthetic.items()])
    f1 = fit_populations(butanol, frame, n_bootstrap=0)
    f2 = fit_populations(butanol, synthetic, n_bootstrap=0)
    np.testing.assert_allclose(f1.populations, f2.populations, atol=1e-12)
    obs = read_observations(pd.DataFrame({"kind": ["noe"], "atom_a": [8], "atom_b": [4],
                                          "value": [2.5], "sigma": [0.2]}))
    assert obs[0].kind == "noe" and obs[0].value == 2.5 and obs[0].sigma == 0.2


def test_bad_observations(butanol):
    with pytest.raises(InputError, match="not a hydrogen"):
        fit_populations(butanol, {(0, 10): 5.0}, n_bootstrap=0)
    with pytest.raises(InputError, match="not a vicinal"):
        fit_populations(butanol, {(8, 14): 5.0}, n_bootstrap=0)   # H8 to the O-H proton
    with pytest.raises(InputError, match="equivalent"):
        fit_populations(butanol, {(5, 6): 5.0}, n_bootstrap=0)
    with pytest.raises(InputError, match="empty"):
        fit_populations(butanol, {}, n_bootstrap=0)
    with pytest.raises(InputError, match="kind"):
        fit_populations(butanol, {("roe", 8, 10): 5.0}, n_bootstrap=0)
    with pytest.raises(InputError, match="sigma must be > 0"):
        fit_populations(butanol, {(8, 10): (5.0, -1.0)}, n_bootstrap=0)
    with pytest.raises(InputError, match="temperature"):
        fit_populations(butanol, {(8, 10): 5.0}, temperature=-3.0)


# ----------------------------------------------------------------------------- figures
def test_figures_are_written(butanol, synthetic, tmp_path):
    from confpop import plot
    from confpop.nmr import average_couplings

    fit = fit_populations(butanol, synthetic, n_bootstrap=0)
    fig = plot.coupling_parity_plot(fit, path=tmp_path / "parity.png")
    assert (tmp_path / "parity.png").stat().st_size > 1000
    assert fig.axes[0].get_xlabel().startswith("observed")
    avg = average_couplings(butanol, [273.15, 298.15, 323.15], by="group")
    plot.coupling_temperature_plot(avg, path=tmp_path / "jt.png")
    assert (tmp_path / "jt.png").stat().st_size > 1000
    with pytest.raises(InputError, match="temperature"):
        plot.coupling_temperature_plot(avg[["group"]])


# ----------------------------------------------------------------------------- command line
def test_couplings_command(butanol, synthetic, tmp_path, capsys):
    from confpop.cli import main

    sdf = tmp_path / "ens.sdf"
    butanol.to_sdf(sdf)
    csv = tmp_path / "observed.csv"
    # the command line numbers atoms from 1, as it prints them
    pd.DataFrame([{"atom_a": a + 1, "atom_b": b + 1, "J_hz": round(v, 3)}
                  for (a, b), v in synthetic.items()]).to_csv(csv, index=False)
    status = main(["couplings", str(sdf), "-T", "273.15", "298.15", "--observed", str(csv),
                   "--json", "--plot", str(tmp_path / "fit.png")])
    out = capsys.readouterr().out
    assert status == 0
    payload = json.loads(out)
    assert payload["temperatures_K"] == [273.15, 298.15]
    fitted = [c["population"] for c in payload["fit"]["conformers"]]
    np.testing.assert_allclose(fitted, TRUTH, atol=0.02)
    assert {(r["atom_a"], r["atom_b"]) for r in payload["fit"]["residuals"]} == \
        {(a + 1, b + 1) for a, b in synthetic}
    assert (tmp_path / "fit.png").stat().st_size > 1000
    status = main(["couplings", str(sdf), "--observed", str(tmp_path / "missing.csv")])
    err = capsys.readouterr().err
    assert status == 2 and err.startswith("confpop: error:") and err.count("\n") == 1


# ----------------------------------------------------------------------------- rotamer families
def test_underdetermined_fit_reports_the_rotamer_families():
    # Methyl beta-D-glucopyranoside, MMFF94 conformers (ring, hydroxyl and hydroxymethyl
    # rotamers): two couplings J(H5,H6R), J(H5,H6S) cannot fix dozens of conformer
    # populations, but they do fix the three hydroxymethyl rotamer families (gg / gt / tg =
    # g- / g+ / t of O5-C5-C6-O6, atoms 3-4-5-6). Synthetic data from known family populations
    # (0.55 / 0.40 / 0.05, a typical gg/gt/tg split for glucosides in water [from memory]) with
    # the conformers of each family in their Boltzmann proportions; the fit must give them back.
    from rdkit.Chem import AllChem
    from confpop.torsion import dihedral_angle
    mol = Chem.AddHs(Chem.MolFromSmiles("CO[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O"))
    AllChem.EmbedMultipleConfs(mol, 40, randomSeed=3)
    energies = np.array([e for _, e in AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=5000)])
    ens = Ensemble.from_mol(mol, energies=energies, level="mmff94", unit="kcal/mol")
    ids = ens.ids()
    omega = np.array([dihedral_angle(ens.positions(c), (3, 4, 5, 6)) for c in ids])
    family = np.where(np.abs(omega) >= 120, "t", np.where(omega >= 0, "g+", "g-"))
    truth = {"g-": 0.55, "g+": 0.40, "t": 0.05}
    boltz = ens.populations([298.15])[298.15].to_numpy()
    p = np.zeros(len(ids))
    for f, share in truth.items():
        m = family == f
        assert m.any()
        p[m] = share * boltz[m] / boltz[m].sum()
    table = couplings(ens)
    observed = {}
    for h6 in (18, 19):
        row = table[(table.atom_a == 17) & (table.atom_b == h6)]
        observed[(17, h6)] = float(row[ids].to_numpy()[0] @ p)
    fit = fit_populations(ens, observed, sigma=0.3, n_bootstrap=100, seed=1)
    assert "underdetermined" in fit.warning
    assert "rotamer-family populations" in fit.warning
    # on the command line (screen and JSON) the same warning numbers atoms from 1
    from confpop.cli import _fit_warning_text
    shown = _fit_warning_text(fit.warning)
    assert "O3-C4-C5-O6" in fit.warning and "O4-C5-C6-O7 " in shown
    assert "O3-C4-C5-O6" not in shown
    fam = fit.families[fit.families.torsion == "O3-C4-C5-O6"].set_index("family")
    assert fam["determined"].all()
    for f, share in truth.items():
        assert fam.loc[f, "population"] == pytest.approx(share, abs=0.03)
        assert 0.0 < fam.loc[f, "population_std"] < 0.1
    # the methyl-ether torsion does not touch these couplings: not determined
    other = fit.families[fit.families.torsion == "C0-O1-C2-O3"]
    assert len(other) and not other["determined"].any()


def test_couplings_command_fit_warning_in_command_line_terms(butanol, synthetic, tmp_path,
                                                              capsys):
    # one rotamer-sensitive coupling cannot fix three populations: the warning on the screen
    # and in the JSON names atoms from 1 and points at what the screen shows, not at a Python
    # attribute (the library's warning says "minimal_subset" and numbers atoms from 0)
    from confpop.cli import main

    sdf = tmp_path / "ens.sdf"
    butanol.to_sdf(sdf)
    csv = tmp_path / "observed.csv"
    csv.write_text(f"atom_a,atom_b,J_hz\n9,11,{synthetic[(8, 10)]:.3f}\n")
    library = fit_populations(butanol, {(8, 10): synthetic[(8, 10)]}, n_bootstrap=20).warning
    assert "minimal_subset" in library
    assert main(["couplings", str(sdf), "--observed", str(csv)]) == 0
    out = capsys.readouterr().out
    warning = next(line for line in out.splitlines() if line.startswith("warning: "))
    assert "underdetermined" in warning and "minimal_subset" not in warning
    assert "smallest conformer set explaining the data" in out
    assert main(["couplings", str(sdf), "--observed", str(csv), "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert "minimal_subset" not in payload["fit"]["warning"]
    from confpop.describe import one_based_labels
    assert payload["fit"]["warning"].startswith(one_based_labels(library.split(";")[0])[:40])
