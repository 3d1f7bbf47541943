"""Every file format in and out: bathymetry grids, coastline files, scenario TOML, run folders and
their manifest, GIS writers (GeoTIFF, NetCDF, GeoPackage, GeoJSON, CSV).

Imports only the top-level modules (errors, constants, grid, cautions).
"""
