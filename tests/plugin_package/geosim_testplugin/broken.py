"""A plugin module that fails to import, as one with a missing dependency would."""
raise ImportError("geosim_testplugin.broken fails to import on purpose (geosim must skip it and say so)")
