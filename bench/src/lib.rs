//! midge-bench: memory footprint, host and emulated Cortex-M latency,
//! target budgets and architecture sweeps.
