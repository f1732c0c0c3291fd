"""Controller kinds: torch modules with named, bounded parameters and a Gaussian exploration head."""
