"""The path-tracing integrator."""
