"""Gas properties: NASA-7 species, fresh charge, burned-gas equilibrium, the constant-gamma gas."""
