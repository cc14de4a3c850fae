"""The HTTP routes, one module per resource; each only parses, calls and maps errors."""
