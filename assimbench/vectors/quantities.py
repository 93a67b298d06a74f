"""Every quantity a reference-vectors file can hold: where it sits, its named dimensions, its units,
the formula it follows and the default tolerance a port is checked against.

A filter's step record (``FilterSpec.steps``) returns a dict of these names in the order they are
computed; the file keeps that order (its root attribute ``computed_in_order``), and a check names
the earliest quantity, at the earliest cycle, where a port departs.

Groups: ``inputs`` (what the analysis step is given), ``draws`` (the random numbers it used),
``intermediates`` (what it computes on the way) and ``outputs`` (the analysis). Inputs and draws are
handed to the port; intermediates and outputs are compared. Conventions (members are rows; sample
covariances divide by N - 1; the ensemble-space coordinates of the ETKF and LETKF) are stated once
in :data:`CONVENTIONS` and stored in every file.

Tolerance: a port's quantity passes at a cycle when

    max |port - reference| over that cycle  <=  tolerance x max |reference| over every cycle,

a norm-wise relative error against the quantity's own scale (1 for a quantity that is all zeros),
so an entry that happens to be near zero does not blow up the ratio. Integer quantities (indices,
flags) must match exactly (tolerance 0).
"""

from typing import NamedTuple

# Default relative tolerances. A float64 port that sums in another order, or takes A^(-1/2) by another
# eigensolver, departs at about 1e-14 to 1e-12 of the scale (measured on the worked example: README);
# 1e-9 leaves room for a poorly conditioned ensemble-space matrix and still catches any convention
# error, which departs at 1e-3 or more. The variational route solves larger systems (B is a
# climatological covariance with a wide eigenvalue range), so it gets 1e-8.
LINEAR_ALGEBRA = 1e-9
VARIATIONAL = 1e-8
EXACT = 0.0


class Quantity(NamedTuple):
    """One quantity: its group, its named dimensions after the leading ``cycle`` (for compared ones;
    static inputs have none), its units, its formula, its default tolerance, and whether it depends
    on the order of the members (such quantities are skipped when a port declares its member order
    arbitrary: the mean and covariance still pin the analysis down)."""

    group: str
    dims: tuple
    units: str
    formula: str
    tolerance: float = LINEAR_ALGEBRA
    member_ordered: bool = False
    per_cycle: bool = True

    @property
    def integer(self) -> bool:
        return self.tolerance == EXACT


ENSEMBLE = ("member", "state")
SQUARE = ("ensemble_row", "ensemble_column")

QUANTITIES = {
    # Inputs: handed to the port, never compared.
    "forecast_ensemble": Quantity("inputs", ENSEMBLE, "state units",
                                  "x_f,i: the members as the forecast model left them, before any inflation",
                                  member_ordered=True),
    "prior_log_weights": Quantity("inputs", ("member",), "1",
                                  "log w_i of the forecast particles, normalised: logsumexp = 0"),
    "observations": Quantity("inputs", ("observation",), "observation units", "y: the observations of the cycle"),
    "observation_error_variance": Quantity("inputs", ("observation",), "observation units^2",
                                           "r_j: the diagonal of R as the filter assumes it (R is diagonal)"),
    "observation_positions": Quantity("inputs", ("observation",), "grid units",
                                      "q_j: each station's position on the ring", per_cycle=False),
    "observation_matrix": Quantity("inputs", ("observation", "state"), "1",
                                   "H: h(x) = f(H x), H selects or interpolates linearly between grid points, f "
                                   "the network's transform (root attribute observation_transform)", per_cycle=False),
    "background_covariance": Quantity("inputs", ("state", "state_column"), "state units^2",
                                      "B = b_scale x C, C the forecast model's climatological covariance",
                                      per_cycle=False),
    # Draws: the random numbers the step used.
    "additive_draws": Quantity("draws", ENSEMBLE, "1",
                               "e_i ~ N(0, I): additive inflation adds additive_std (e_i - mean_k e_k)",
                               member_ordered=True),
    "observation_perturbation_draws": Quantity("draws", ("member", "observation"), "1",
                                               "e_i ~ N(0, I): member i assimilates y + sqrt(r) (e_i - mean_k e_k) when "
                                               "filter.centre_perturbations is true (attribute of /settings), "
                                               "else y + sqrt(r) e_i",
                                               member_ordered=True),
    "resampling_offset": Quantity("draws", (), "1", "u ~ U[0, 1): systematic resampling takes the points (k + u) / N"),
    "jitter_draws": Quantity("draws", ENSEMBLE, "1",
                             "e_i ~ N(0, I): after resampling, particle i becomes x_(k_i) + jitter e_i",
                             member_ordered=True),
    # Intermediates: compared, in the order a step computes them.
    "prior_ensemble": Quantity("intermediates", ENSEMBLE, "state units",
                               "x_b,i = xbar_f + inflation (x_f,i - xbar_f), then additive noise: the ensemble the "
                               "update sees", member_ordered=True),
    "predicted_observations": Quantity("intermediates", ("member", "observation"), "observation units",
                                       "h(x_b,i)", member_ordered=True),
    "innovation": Quantity("intermediates", ("observation",), "observation units",
                           "d = y - mean_i h(x_b,i) (for 3D-Var: y - h(x_b))"),
    "ensemble_precision": Quantity("intermediates", SQUARE, "1",
                                   "A = (N - 1) I + Y R^-1 Y^T, Y (N, p) the anomalies of h(x_b,i)",
                                   member_ordered=True),
    "mean_weights": Quantity("intermediates", ("ensemble_row",), "1", "wbar = A^-1 Y R^-1 d", member_ordered=True),
    "transform": Quantity("intermediates", SQUARE, "1",
                          "W = sqrt(N - 1) A^(-1/2), the symmetric square root", member_ordered=True),
    "analysis_weights": Quantity("intermediates", ("member", "ensemble_column"), "1",
                                 "T = 1 wbar^T + W: x_a,i = xbar + sum_j T_ij X_j, X_j = x_b,j - xbar",
                                 member_ordered=True),
    "localization_weights": Quantity("intermediates", ("state", "observation"), "1",
                                     "rho_gj = GC(dist(g, q_j) / radius) (Gaspari-Cohn 1999, eq. 4.10); "
                                     "1 everywhere without localization"),
    "local_precision": Quantity("intermediates", ("state",) + SQUARE, "1",
                                "A_g = (N - 1) I + Y R_g^-1 Y^T, R_g^-1 = diag(rho_g / r)", member_ordered=True),
    "local_mean_weights": Quantity("intermediates", ("state", "ensemble_row"), "1",
                                   "wbar_g = A_g^-1 Y R_g^-1 d", member_ordered=True),
    "local_transform": Quantity("intermediates", ("state",) + SQUARE, "1",
                                "W_g = sqrt(N - 1) A_g^(-1/2), the symmetric square root", member_ordered=True),
    "serial_gain": Quantity("intermediates", ("observation", "state"), "state units / observation units",
                            "K_j = rho_j * cov(x, h_j) / (var(h_j) + r_j), observation j assimilated after "
                            "observations 1 .. j-1, h(x) carried along as state; mean += K_j (y_j - mean h_j), "
                            "anomalies -= alpha K_j h'_j, alpha = 1 / (1 + sqrt(r_j / (var(h_j) + r_j))) "
                            "(Whitaker & Hamill 2002, eq. 4-13)"),
    "serial_mean": Quantity("intermediates", ("observation", "state"), "state units",
                            "the ensemble mean after observations 1 .. j are assimilated"),
    "perturbed_observations": Quantity("intermediates", ("member", "observation"), "observation units",
                                       "y + sqrt(r) (e_i - mean_k e_k), or y + sqrt(r) e_i when "
                                       "filter.centre_perturbations is false; e_i from observation_perturbation_draws",
                                       member_ordered=True),
    "gain": Quantity("intermediates", ("state", "observation"), "state units / observation units",
                     "K = X^T Y (Y^T Y + (N - 1) R)^-1 for the EnKF (X, Y anomalies of x_b and h(x_b)), whose "
                     "member i becomes x_b,i + K (y_i - h(x_b,i)), y_i the perturbed observations; "
                     "K = B H^T (H B H^T + R)^-1 for 3D-Var, at the background"),
    "cost_at_background": Quantity("intermediates", (), "1",
                                   "J(x_b) = 1/2 (y - h(x_b))^T R^-1 (y - h(x_b))", VARIATIONAL),
    "gradient_at_background": Quantity("intermediates", ("state",), "1 / state units",
                                       "grad J(x_b) = -H^T R^-1 (y - h(x_b)), H = dh/dx at x_b", VARIATIONAL),
    "cost_at_analysis": Quantity("intermediates", (), "1",
                                 "J(x_a) = 1/2 (x_a - x_b)^T B^-1 (x_a - x_b) + 1/2 (y - h(x_a))^T R^-1 (y - h(x_a))",
                                 VARIATIONAL),
    "updated_log_weights": Quantity("intermediates", ("member",), "1",
                                    "log w_i - 1/2 (y - h(x_i))^T R^-1 (y - h(x_i)), normalised", member_ordered=True),
    "effective_sample_size": Quantity("intermediates", (), "members", "1 / sum_i w_i^2 of the updated weights"),
    "resampled": Quantity("intermediates", (), "1", "1 when effective_sample_size < ess_threshold x N, else 0",
                          EXACT),
    "resampled_indices": Quantity("intermediates", ("member",), "1",
                                  "k_i: the forecast particle (0-based) that analysis particle i copies: the first k "
                                  "with cumsum(w)_k > (i + u) / N (systematic resampling, Kitagawa 1996); i itself "
                                  "when not resampled", EXACT, member_ordered=True),
    "update_ensemble": Quantity("intermediates", ENSEMBLE, "state units",
                                "the update's analysis x_u before relaxation to the prior x_b (prior_ensemble): RTPP "
                                "x_a = xbar_u + (1 - a)(x_u - xbar_u) + a (x_b - xbar_b); RTPS x_a = xbar_u + (x_u - "
                                "xbar_u)(a (s_b - s_u) / s_u + 1), s the per-variable spread (N - 1); RTPP first",
                                member_ordered=True),
    # Outputs: compared.
    "analysis_ensemble": Quantity("outputs", ENSEMBLE, "state units", "x_a,i", member_ordered=True),
    "analysis_log_weights": Quantity("outputs", ("member",), "1",
                                     "log w_a,i: updated_log_weights, or -log N for every particle after resampling",
                                     member_ordered=True),
    "analysis_mean": Quantity("outputs", ("state",), "state units", "xbar_a = sum_i w_i x_a,i (w_i = 1/N unweighted)"),
    "analysis_covariance": Quantity("outputs", ("state", "state_column"), "state units^2",
                                    "P_a = sum_i w_i (x_a,i - xbar_a)(x_a,i - xbar_a)^T N / (N - 1) (w_i = 1/N "
                                    "unweighted: X_a^T X_a / (N - 1))"),
}

INPUT_GROUPS = ("inputs", "draws")
COMPARED_GROUPS = ("intermediates", "outputs")

CONVENTIONS = {
    "convention_members": "members are rows: an ensemble is (member, state), (N, n); anomalies X_j = x_j - xbar",
    "convention_covariance": "sample covariances divide by N - 1",
    "convention_inflation": "filter.inflation multiplies the forecast anomalies before the update "
                            "(intermediates/prior_ensemble holds them inflated, inputs/forecast_ensemble "
                            "does not); additive noise follows it; RTPP and RTPS relax the update's "
                            "analysis to the prior afterwards",
    "convention_ensemble_space": "A, wbar, W and T act on the anomalies of the prior ensemble, rows first: "
                                 "x_a,i = xbar + sum_j (wbar_j + W_ji) X_j; W is symmetric, so no sign or "
                                 "eigenvector convention enters any stored quantity",
    "convention_localization": "radius c is the Gaspari-Cohn half-width in grid units (weights reach 0 at 2c), "
                               "distances taken around the periodic ring (the shorter way); "
                               "the LETKF divides each local r_j by rho_gj, the EnSRF multiplies its gain by rho",
}


def path_of(name: str) -> str:
    """The dataset path of ``name`` in a vectors or port file."""
    return f"{QUANTITIES[name].group}/{name}"


def compared(name: str) -> bool:
    return QUANTITIES[name].group in COMPARED_GROUPS
