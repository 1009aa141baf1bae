"""Built-in configs (installed as cyclesim.configs)."""
