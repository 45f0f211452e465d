"""Inputs of published worked examples, typed in the tests from the source (not loaded from the
specs shipped in budget/references/), so a test's inputs stay independent of the shipped copy.
"""

# EA-4/02 M:2022 supplement S3, calibration of a 10 kΩ standard resistor (REFERENCES.md):
# R_X = (R_S + δR_D + δR_TS)·r_C·r − δR_TX, published R_X = 10 000.178 Ω, u = 8.3 mΩ.
EA402_SPEC = """
    [budget]
    coverage_probability = 0.9545
    [model]
    R_X = "(R_S + dR_D + dR_TS) * r_C * r - dR_TX"
    [inputs.R_S]
    value = 10000.053
    expanded_uncertainty = 0.005
    coverage_factor = 2
    coverage_probability = 0.9545   # EA-4/02 §5: k = 2 of a normal distribution
    [inputs.dR_D]
    value = 0.020
    distribution = "rectangular"
    half_width = 0.010
    [inputs.dR_TS]
    value = 0.0
    distribution = "rectangular"
    half_width = 0.00275
    [inputs.r_C]
    value = 1.0
    distribution = "triangular"
    half_width = 1.0e-6
    [inputs.r]
    value = 1.0000105
    standard_uncertainty = 0.07e-6
    [inputs.dR_TX]
    value = 0.0
    distribution = "rectangular"
    half_width = 0.0055
"""

#: the same with a fixed Monte Carlo section (trials, seed) for the JCGM 101 checks
EA402_SPEC_MC = EA402_SPEC.replace("    [model]", "    [monte_carlo]\n    trials = 200000\n"
                                   "    seed = 402\n    [model]", 1)
