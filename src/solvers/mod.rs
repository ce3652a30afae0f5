//! Generic numerical solvers (scalar bracketing, Newton helpers, ODE integration).
