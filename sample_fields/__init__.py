"""The invented sample fields, shipped with geosim as package data (see README.md here).

Copy them with ``geosim samples NAME FOLDER`` or :func:`geosim.demo.copy_sample`.
"""
