"""Compiled loops (numba). Private: arrays and scalars in, arrays out.

Nothing here knows about kernel or model objects; the public layers validate
and convert before calling in. Each loop has a plain-numpy twin in tests/.
"""
