"""Files in and out: areas (read, validate), lookups, output folders, open test data.

Modules are imported directly (`zonedesign.io.read`, `.formats`, `.table`, `.lookup`, `.output`, `.opendata`);
this package imports nothing itself, so importing one of them stays cheap.
"""
