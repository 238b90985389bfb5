"""Layer 4, sensitivity: what becomes of the 2SLS estimate when the exclusion restriction is
relaxed — direct-effect sets, union of intervals and identified set, breakdown and frontier,
weak-IV-robust sets, priors, the falsification adaptive set, calibration yardsticks and stress
tests from published numbers."""
