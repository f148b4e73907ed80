"""geosim command line (installed as the geosim_cli package)."""
