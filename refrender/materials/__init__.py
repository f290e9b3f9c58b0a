"""Material models (BSDFs), each with its sampler and pdf."""
