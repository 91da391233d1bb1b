"""Request and response schemas, one module per resource; shared parts in common.py."""
