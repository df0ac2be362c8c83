"""The per-object result record shared by the survey runner and the result store.

Plain typed fields only (rule: never ``dtype=object``), so a batch of records
maps onto fixed-dtype HDF5 columns.
"""

from __future__ import annotations

from dataclasses import dataclass, field

# Status values, in the order stored as small integers in result files.
STATUSES = ("ok", "bad_input", "failed", "not_converged")


@dataclass
class ObjectResult:
    """Outcome of fitting one object of a survey.

    Attributes
    ----------
    id : str
        Object identifier from the survey file.
    status : str
        One of ``STATUSES``.
    method : str
        Inference method actually used (``auto`` records its choice here).
    n : int
        Points used in the fit (after clipping).
    params : dict of str to float
        Fitted hyperparameters by name (empty unless fitted).
    log_marginal_likelihood : float
        NaN when not fitted.
    bound_gap : float
        Upper minus lower certified bound for sparse methods, NaN otherwise.
    n_evaluations : int
    converged : bool
    message : str
        Optimiser message, or the reason for a bad or failed object.
    runtime : float
        Wall seconds for this object.
    reduced_chi2 : float
        Sum of squared standardised residuals divided by (n - free parameters).
    n_clipped : int
        Points removed by sigma clipping.
    """

    id: str
    status: str
    method: str = ""
    n: int = 0
    params: dict = field(default_factory=dict)
    log_marginal_likelihood: float = float("nan")
    bound_gap: float = float("nan")
    n_evaluations: int = 0
    converged: bool = False
    message: str = ""
    runtime: float = 0.0
    reduced_chi2: float = float("nan")
    n_clipped: int = 0

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}, got {self.status!r}")
