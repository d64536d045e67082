"""Layer 9 -- per-job tasks that run any command's work over a jobs table."""
