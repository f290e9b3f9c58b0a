"""Random numbers and sampling routines (each beside its pdf)."""
