"""Layer 4, sensitivity: what becomes of the 2SLS estimate when the exclusion restriction is
relaxed — direct-effect sets, union of intervals and identified set, breakdown and frontier,
weak-IV-robust sets, priors, the falsification adaptive set, calibration yardsticks and stress
tests from published numbers.

Modules, lowest first (each imports only those above it)
---------------------------------------------------------
``direct_sets``
    The set Γ of direct effects: ``--direct`` ranges, their units (:class:`Scale`), boxes and
    polytopes with their vertices.
``linear_core``
    ``β̂(γ)`` and its variance quadratic for the focus coefficient, from a fit's pieces.
``union``, ``frontier``
    Exact unions of intervals, identified sets and breakdown scales; the breakdown frontier.
``robust_set``
    The reduced form and the weak-instrument-robust (Anderson–Rubin) sensitivity set.
``adaptive_programmes``, ``adaptive``
    The falsification adaptive set: its programmes and closed forms, then the entry points.
``bounds``
    The sweep API (``sweep``, ``analyse``, ``SweepResult``).
``prior_laws``, ``prior``
    Prior laws of the direct effect; prior intervals and the prior map.
``yardsticks``, ``zero_first_stage``, ``calibrate``
    Calibration yardsticks: leave-one-out yardsticks, the zero-first-stage estimate, the entry point.
``published_inputs``, ``published_covariance``, ``published``
    Stress tests from a published table's printed numbers.
"""
