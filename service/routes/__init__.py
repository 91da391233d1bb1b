"""HTTP routes, one module per resource, each exposing ``build_router``."""
