"""Outside values the tests compare against, with their sources: the project's own table.

One entry per value taken from outside the project (handbook tables, published parameter
sets, experimental data, worked values of a published formula, rules of thumb). Tests import
the numbers from here, so a value and its source are written down in one place only.

Each entry has a value (a number, a tuple of numbers, or a ``(low, high)`` range), a unit
(``"1"`` for a pure number), a source (a full citation where known) and a tag:

- ``"primary"``: checked against the primary source (the paper, the handbook table, the
  CODATA / NIST / JANAF compilation itself);
- ``"secondary"``: seen quoted, with its citation, in a secondary source (public code, a
  course page, a review), not in the primary source;
- ``"from memory"``: not checked against any source; treat with care;
- ``"common practice"``: a rule of thumb of the trade, not a measured number;
- ``"computed"``: an arithmetic check, evaluated from the stated formula with CODATA 2022
  constants; the number is exact to the digits given, the formula carries the citation.

Tolerances stay in the tests, next to the method error they allow for.

``note`` records the checks made against other sources. A search of public pages and code
(2026-12-02, Karplus sets first) found no primary source for any "secondary" or "from
memory" entry; where it found independent quotes, they are named in the note and agree with
the value (so those tags stay as they are, with a note of the agreement).
"""

from dataclasses import dataclass
from typing import Any

TAGS = ("primary", "secondary", "from memory", "common practice", "computed")

CODATA_2022 = ("CODATA 2022 recommended values of the fundamental physical constants "
               "(NIST, physics.nist.gov/constants), as tabulated in scipy.constants")
CCCBDB = ("NIST Computational Chemistry Comparison and Benchmark Database (CCCBDB), NIST "
          "Standard Reference Database 101, experimental data")
WEBBOOK = "NIST Chemistry WebBook, NIST Standard Reference Database 69, gas-phase thermochemistry"
JANAF = ("NIST-JANAF Thermochemical Tables, 4th ed. (Chase, J. Phys. Chem. Ref. Data "
         "Monograph 9, 1998) [edition details from memory]")
BOLTZMANN = ("Boltzmann populations p_i = g_i exp(-G_i/RT) / sum, G_ens = -RT ln sum, "
             "S_conf = -R sum p ln p (any statistical-mechanics text, e.g. McQuarrie & Simon, "
             "Molecular Thermodynamics, 1999); evaluated with CODATA 2022 R")
EYRING = ("Eyring equation k = (k_B T / h) exp(-dG/RT), t1/2 = ln 2 / k (Eyring, J. Chem. "
          "Phys. 1935, 3, 107 [citation from memory]); evaluated with CODATA 2022 constants")
GUTOWSKY_HOLM = ("coalescence of two equally populated uncoupled singlets, k_c = pi dnu / sqrt 2 "
                 "(Gutowsky & Holm, J. Chem. Phys. 1956, 25, 1228 [citation from "
                 "memory]); evaluated with CODATA 2022 constants")
RRHO = ("ideal-gas rigid-rotor harmonic-oscillator formulas (Ochterski, 'Thermochemistry "
        "in Gaussian', 2000; McQuarrie & Simon, Molecular Thermodynamics, 1999); evaluated here "
        "with CODATA 2022 constants")
QRRHO = ("quasi-RRHO entropy: Grimme, Chem. Eur. J. 2012, 18, 9955 (free-rotor interpolation, "
         "w = 1/(1 + (100 cm-1 / nu)^4), B_av = 1e-44 kg m^2 [from memory]); evaluated here at "
         "298.15 K with CODATA 2022 constants")
HLA = ("Haasnoot, de Leeuw & Altona, Tetrahedron 1980, 36, 2783-2792 "
       "(generalized Karplus equation, P1..P7 with P3 = 0, P6 in degrees)")
HLA_SEEN = ("; the paper itself not available here: seen quoted with this citation in public "
            "source code (see the docstring of confpop.nmr.karplus)")
EWM = ("Eliel, Wilen & Mander, Stereochemistry of Organic Compounds, "
       "1994, Table 11.7 (cyclohexane A-values)")
SYMMETRY = ("rotational symmetry number of the molecule's point group (C1/Cs 1, Cn/Cnv n, "
            "Dn/Dnd/Dnh 2n, Td 12, Oh 24, C-inf-v 1, D-inf-h 2; McQuarrie & Simon, Molecular "
            "Thermodynamics, 1999)")

LINDH = ("Lindh, Bernhardsson, Karlstrom & Malmqvist, Chem. Phys. Lett. 1995, 241, 423, "
         "doi:10.1016/0009-2614(95)00646-L, Table 1 (k_r, k_phi, k_tau and alpha seen quoted "
         "with this citation in public source code; r_ref from memory)")


@dataclass(frozen=True)
class Reference:
    value: Any
    unit: str
    source: str
    tag: str
    note: str = ""


def _r(value, unit, source, tag, note=""):
    return Reference(value, unit, source, tag, note)


REFERENCE_VALUES = {
    # ------------------------------------------------------------------- constants
    "hartree_in_kcal_per_mol": _r(627.509474063, "kcal/mol", CODATA_2022, "primary"),
    "hartree_in_kj_per_mol": _r(2625.49963948, "kJ/mol", CODATA_2022, "primary"),
    "hartree_in_ev": _r(27.211386245981, "eV", CODATA_2022, "primary"),
    "hartree_in_wavenumber": _r(219474.6313632, "cm-1", CODATA_2022, "primary"),
    "gas_constant_kcal": _r(1.987204258640832e-3, "kcal/(mol K)",
                            "R = N_A k_B (exact in the 2019 SI) / 4184 J/kcal; " + CODATA_2022,
                            "computed"),
    "rt_298": _r(0.59248495, "kcal/mol", "R T at 298.15 K; " + CODATA_2022, "computed"),
    # ------------------------------------------------------------- Boltzmann statistics
    # two states, G = (0, 1) kcal/mol, g = (1, 1), 298.15 K
    "two_state_populations": _r((0.8439355, 0.1560645), "1", BOLTZMANN, "computed"),
    "two_state_ensemble_free_energy": _r(-0.1005324, "kcal/mol", BOLTZMANN, "computed"),
    "two_state_conformational_entropy": _r(0.86063, "cal/(mol K)", BOLTZMANN, "computed"),
    # three states, G = (0, 0.5, 1.2) kcal/mol, g = (1, 2, 1), 298.15 K
    "three_state_populations": _r((0.5020073, 0.4317551, 0.0662375), "1", BOLTZMANN, "computed"),
    "three_state_ensemble_free_energy": _r(-0.4083054, "kcal/mol", BOLTZMANN, "computed"),
    "three_state_conformational_entropy": _r(1.76540, "cal/(mol K)", BOLTZMANN, "computed"),
    # ------------------------------------------------------------------------ kinetics
    "eyring_prefactor_298": _r(6.2124e12, "s-1", "k_B T / h at 298.15 K; " + CODATA_2022,
                               "computed"),
    "half_life_20_kcal_298": _r(51.0, "s", EYRING, "computed"),
    "half_life_30_kcal_298": _r(34.6, "yr (Julian)", EYRING, "computed"),
    "half_life_20_kcal_310": _r(13.3, "s", EYRING, "computed"),
    "half_life_30_kcal_310": _r(4.68, "yr (Julian)", EYRING, "computed"),
    "time_scale_5_kcal_room_temperature": _r(
        (1e-10, 1e-8), "s", "a ~5 kcal/mol barrier is crossed in about a nanosecond at room "
        "temperature", "common practice"),
    "time_scale_20_kcal_room_temperature": _r(
        (1.0, 120.0), "s", "a ~20 kcal/mol barrier: seconds to a minute at room temperature",
        "common practice"),
    "time_scale_30_kcal_room_temperature": _r(
        (1.0, 100.0), "yr (Julian)", "a ~30 kcal/mol barrier: years at room temperature",
        "common practice"),
    "atropisomer_class_limits_37C": _r(
        (60.0, 4.5), "(s, yr)",
        "LaPlante et al., J. Med. Chem. 2011, 54, 7005, doi:10.1021/jm200584g: class 1 "
        "t1/2 < 60 s, class 2 60 s to 4.5 yr, class 3 > 4.5 yr at 37 C; thresholds as "
        "summarised in Acc. Chem. Res. 2022, 55, 2904", "secondary"),
    "coalescence_rate_100_hz": _r(222.14, "s-1", GUTOWSKY_HOLM, "computed"),
    "coalescence_barrier_300_K_100_hz": _r(14.34, "kcal/mol", GUTOWSKY_HOLM + "; Eyring at k_c",
                                           "computed"),
    "coalescence_shortcut_constant": _r(
        22.96, "1", "dG = R T_c [22.96 + ln(T_c / dnu)] J/mol, the textbook form of the "
        "Gutowsky-Holm coalescence barrier (J. Chem. Phys. 1956, 25, 1228)", "from memory"),
    # ------------------------------------------------------------------ thermochemistry
    "entropy_1_atm_minus_1_bar": _r(-0.10944, "J/(mol K)", "-R ln(101325 / 100000); " + CODATA_2022,
                                    "computed"),
    "standard_state_1_atm_to_1_M_298": _r(1.8943, "kcal/mol",
                                          "RT ln(24.4654) at 298.15 K; " + CODATA_2022, "computed"),
    "standard_state_1_bar_to_1_M_298": _r(1.9021, "kcal/mol",
                                          "RT ln(24.7896) at 298.15 K; " + CODATA_2022, "computed"),
    "water_fundamentals": _r((3657.0, 1595.0, 3756.0), "cm-1", CCCBDB + " (H2O)", "primary"),
    "water_rotational_constants": _r((27.877, 14.512, 9.285), "cm-1", CCCBDB + " (H2O)",
                                     "primary"),
    "water_standard_entropy": _r(188.84, "J/(mol K)",
                                 CCCBDB + " (H2O, gas, 298.15 K, 1 bar; JANAF value)", "primary"),
    "water_rrho_entropy": _r(188.71, "J/(mol K)", RRHO + "; from the CCCBDB constants above",
                             "computed"),
    "carbon_dioxide_fundamentals": _r((1333.0, 667.0, 667.0, 2349.0), "cm-1",
                                      CCCBDB + " (CO2)", "primary"),
    "carbon_dioxide_rotational_constant": _r(0.39021, "cm-1", CCCBDB + " (CO2)", "primary"),
    "carbon_dioxide_standard_entropy": _r(213.785, "J/(mol K)",
                                          WEBBOOK + " (CO2, gas, 298.15 K, 1 bar)", "primary"),
    "carbon_dioxide_rrho_entropy": _r(213.78, "J/(mol K)", RRHO + "; from the CCCBDB constants",
                                      "computed"),
    "methane_fundamentals": _r((2917.0, 1534.0, 1534.0, 3019.0, 3019.0, 3019.0, 1306.0, 1306.0,
                                1306.0), "cm-1", "experimental fundamentals of CH4 (as in "
                               "the NIST CCCBDB)", "from memory"),
    "methane_rotational_constant": _r(5.241, "cm-1", "experimental B of CH4 (as in the NIST "
                                      "CCCBDB)", "from memory"),
    "methane_standard_entropy": _r(186.251, "J/(mol K)", JANAF + " (CH4, gas, 298.15 K, 1 bar)",
                                   "from memory",
                                   "checked 2026-12-02: only rounded secondary values found (186.16 "
                                   "at 1 atm in an engineering textbook table, 186.26 quoted as "
                                   "NIST on a calculator page), consistent to 0.1 J/(mol K); the "
                                   "JANAF table itself was not found"),
    "methane_rrho_entropy": _r(186.31, "J/(mol K)", RRHO + "; from the CH4 constants above",
                               "computed"),
    # single-mode vibrational entropy at 298.15 K: (S_HO, S_free-rotor, S_qRRHO)
    "qrrho_mode_50": _r((20.1559, 14.8245, 15.1381), "J/(mol K)", QRRHO, "computed"),
    "qrrho_mode_100": _r((14.4529, 11.9441, 13.1985), "J/(mol K)", QRRHO, "computed"),
    "qrrho_mode_200": _r((8.9249, 9.0631, 8.9330), "J/(mol K)", QRRHO, "computed"),
    "wavenumber_factor": _r(5140.487, "cm-1 per sqrt(hartree bohr-2 amu-1)",
                            "sqrt(E_h / (a_0^2 u)) / (2 pi c); " + CODATA_2022, "computed"),
    # -------------------------------------------------------------- symmetry numbers
    "symmetry_number_water": _r(2, "1", SYMMETRY + " (C2v)", "from memory"),
    "symmetry_number_ammonia": _r(3, "1", SYMMETRY + " (C3v)", "from memory"),
    "symmetry_number_methane": _r(12, "1", SYMMETRY + " (Td)", "from memory"),
    "symmetry_number_benzene": _r(12, "1", SYMMETRY + " (D6h)", "from memory"),
    "symmetry_number_ethane": _r(6, "1", SYMMETRY + " (staggered D3d, eclipsed D3h)",
                                 "from memory"),
    "symmetry_number_carbon_dioxide": _r(2, "1", SYMMETRY + " (D-inf-h)", "from memory"),
    "symmetry_number_hydrogen_cyanide": _r(1, "1", SYMMETRY + " (C-inf-v)", "from memory"),
    "symmetry_number_ethylene": _r(4, "1", SYMMETRY + " (D2h)", "from memory"),
    "symmetry_number_cyclohexane_chair": _r(6, "1", SYMMETRY + " (D3d)", "from memory"),
    "symmetry_number_ethanol": _r(1, "1", SYMMETRY + " (C1 / Cs)", "from memory"),
    # --------------------------------------------------------------- vicinal couplings
    "haasnoot_a": _r((13.86, -0.81, 0.0, 0.56, -2.32, 17.9, 0.0), "(Hz x5, deg, 1)",
                     HLA + ", set A (no beta correction)" + HLA_SEEN, "secondary",
                     "checked 2026-12-02: a second, independent public NMR coupling script lists "
                     "the same six coefficients (13.86, -0.81, 0, 0.56, -2.32, 17.9) for the "
                     "equation of Haasnoot, de Leeuw and Altona; the paper was not found"),
    "haasnoot_general": _r((13.70, -0.73, 0.0, 0.56, -2.47, 16.9, 0.14), "(Hz x5, deg, 1)",
                           HLA + ", set B (general, with the beta correction)" + HLA_SEEN
                           + " and on a university NMR course page", "secondary",
                           "checked 2026-12-02: no further quote found; the paper was not found"),
    "haasnoot_2": _r((13.89, -0.98, 0.0, 1.02, -3.40, 14.9, 0.24), "(Hz x5, deg, 1)",
                     HLA + ", set C (two non-H substituents)" + HLA_SEEN, "secondary"),
    "haasnoot_3": _r((13.22, -0.99, 0.0, 0.87, -2.46, 19.9, 0.0), "(Hz x5, deg, 1)",
                     HLA + ", set D (three non-H substituents)" + HLA_SEEN, "secondary"),
    "haasnoot_4": _r((13.24, -0.91, 0.0, 0.53, -2.41, 15.5, 0.19), "(Hz x5, deg, 1)",
                     HLA + ", set E (four non-H substituents)" + HLA_SEEN, "secondary"),
    "vuister_bax_1993": _r((6.51, -1.76, 1.60), "Hz",
                           "Vuister & Bax, J. Am. Chem. Soc. 1993, 115, 7772: "
                           "3J(HN,HA) = A cos^2 theta + B cos theta + C, theta = phi - 60 deg; "
                           "seen in coefficient tables of public NMR analysis code", "secondary",
                           "checked 2026-12-02: the same (6.51, -1.76, 1.60) with theta = phi - 60 deg "
                           "in at least five independent public codes (among them the "
                           "dihedral-analysis tool of a widely used MD package); the paper was "
                           "not found"),
    "hu_bax_1997": _r((7.09, -1.42, 1.55), "Hz",
                      "Hu & Bax, J. Am. Chem. Soc. 1997, 119, 6360 (Table 2); seen in "
                      "coefficient tables of public NMR analysis code", "secondary",
                      "checked 2026-12-02: two independent public analysis scripts give the same "
                      "(7.09, -1.42, 1.55) with this citation; the paper was not found"),
    "vuister_bax_j_at_phi_minus_120": _r(9.87, "Hz", "Vuister & Bax 1993 set at phi = -120 deg",
                                         "computed"),
    "vuister_bax_j_at_phi_minus_60": _r(4.11, "Hz", "Vuister & Bax 1993 set at phi = -60 deg",
                                        "computed"),
    "wasylishen_schaefer_1973": _r((4.26, -1.00, 3.56), "Hz",
                                   "Wasylishen & Schaefer, Can. J. Chem. 1973, 51, 961: "
                                   "3J(C,H) = 4.26 - 1.00 cos phi + 3.56 cos 2 phi; seen quoted "
                                   "with its citation in public molecular-viewer source code",
                                   "secondary",
                                   "checked 2026-12-02: the manual of a public NMR coupling program "
                                   "gives J = 3.56 cos 2theta - cos theta + 4.26 with the same "
                                   "citation (Can. J. Chem. 1973, 51, 961); the paper was not "
                                   "found"),
    "cyclohexane_j_ax_ax": _r(13.1, "Hz", "cyclohexane chair 3J(Hax,Hax), NMR handbook tables",
                              "from memory"),
    "cyclohexane_j_ax_ax_range": _r((10.0, 13.5), "Hz", "3J(Hax,Hax) in six-membered rings, NMR "
                                    "handbook tables", "from memory"),
    "cyclohexane_j_ax_eq_range": _r((2.0, 5.0), "Hz", "3J(Hax,Heq) and 3J(Heq,Heq) in "
                                    "six-membered rings, NMR handbook tables", "from memory"),
    "glucopyranose_j12_alpha": _r(3.7, "Hz", "alpha-D-glucopyranose / -glucopyranosides, "
                                  "3J(H1,H2)", "from memory"),
    "glucopyranose_j12_beta": _r(8.0, "Hz", "beta-D-glucopyranose / -glucopyranosides, "
                                 "3J(H1,H2)", "from memory"),
    "glucopyranose_ring_j_trans_diaxial": _r((9.0, 10.0), "Hz", "beta-D-glucopyranose "
                                             "J2,3 / J3,4 / J4,5", "from memory"),
    # ------------------------------------------------------- conformational energies
    "butane_gauche_anti_dh_herrebout": _r(
        0.67, "kcal/mol", "Herrebout et al., J. Phys. Chem. 1995, 99, 578 (gas; "
        "+/- 0.10)", "primary"),
    "butane_gauche_anti_dh_balabin": _r(
        0.66, "kcal/mol", "Balabin, J. Phys. Chem. A 2009, 113, 1012 (gas; +/- 0.02)",
        "primary"),
    "butane_gauche_anti_ccsdt": _r(0.59, "kcal/mol", "Smith & Jaffe, J. Phys. Chem. "
                                   "1996, 100, 18718 (CCSD(T))", "primary"),
    "butane_syn_barrier_ccsdt": _r(5.48, "kcal/mol", "Smith & Jaffe, J. Phys. Chem. "
                                   "1996, 100, 18718 (CCSD(T))", "primary"),
    "ethane_rotational_barrier": _r(2.9, "kcal/mol", "Weiss & Leroi, J. Chem. Phys. "
                                    "1968, 48, 962", "primary"),
    "gfn2_conformer_energy_error": _r(
        (0.5, 1.5), "kcal/mol", "typical error of GFN2-xTB conformer energies against "
        "high-level references", "common practice"),
    "a_value_methyl": _r(1.74, "kcal/mol", EWM, "from memory"),
    "a_value_phenyl": _r(2.8, "kcal/mol", EWM, "from memory"),
    "cyclohexane_twist_boat_above_chair": _r(5.5, "kcal/mol", "Anet & Bourn, "
                                             "J. Am. Chem. Soc. 1967, 89, 760", "from memory"),
    "dichloroethane_anti_preference_gas": _r((1.1, 1.2), "kcal/mol", "1,2-dichloroethane, gas "
                                             "phase, gauche - anti", "from memory"),
    # ------------------------------------------------------- ring puckering, hydrogen bonds
    "six_ring_ideal_theta": _r(
        (0.0, 90.0, 50.8), "degree", "Cremer & Pople, J. Am. Chem. Soc. 1975, 97, 1354: ideal "
        "chair (theta 0 or 180), boat and twist-boat (theta 90; phi 0 / 30 mod 60), "
        "half-chair and envelope (theta ~50.8)", "from memory"),
    "five_ring_ideal_phi_period": _r(
        (36.0, 18.0), "degree", "Cremer & Pople 1975: cyclopentane envelope at phi_2 = 36k, "
        "twist at 18 + 36k", "from memory"),
    "cyclohexane_chair_q": _r((0.55, 0.63), "angstrom", "total puckering amplitude Q of the "
                              "cyclohexane chair", "from memory"),
    "hydrogen_bond_geometry": _r((2.5, 110.0), "angstrom, degree", "geometric H-bond criteria "
                                 "H...Y <= 2.5 A (common practice), X-H...Y > 110 degrees "
                                 "(IUPAC recommendation, Arunan et al., Pure Appl. Chem. 2011, "
                                 "83, 1637)", "from memory"),
    # Lindh model Hessian: k_r (stretch force constant) and the H-H reference distance
    "lindh_k_stretch": _r(0.45, "hartree/bohr^2", LINDH, "secondary"),
    "lindh_r_ref_hh": _r(1.35, "bohr", LINDH, "from memory"),
}


def value(name):
    """The value of one entry (a KeyError names an entry that is not in the table)."""
    return REFERENCE_VALUES[name].value
