"""Published and certified values the tests check against, each with its source."""

# NIST StRD nonlinear regression, Misra1d (Misra 1978), certified values.
MISRA1D = {
    "b1": 4.3736970754e02,
    "b1_sd": 3.6489174345e00,
    "b2": 3.0227324449e-04,
    "b2_sd": 2.9334354479e-06,
    "rss": 5.6419295283e-02,
    "residual_sd": 6.8568272111e-02,
    "starts": ({"b1": 500.0, "b2": 1e-4}, {"b1": 450.0, "b2": 3e-4}),
}

# Puromycin, treated cells: Bates & Watts (1988), Appendix A1.3 / §2.2, least-squares
# Michaelis–Menten fit; full-precision estimates as printed by R's nls on datasets::Puromycin.
PUROMYCIN_TREATED = {
    "vmax": 212.68370711,
    "vmax_se": 6.947,
    "km": 0.06412123,
    "km_se": 0.008281,
    "residual_se": 10.93,
    "df": 10,
    "rss": 1195.449,
}
