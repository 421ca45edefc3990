"""lamellume: screening layered compounds for bright, strongly bound excitons.

The package is a plain Python library. Physics modules take and return numbers
or numpy arrays in the internal unit system of :mod:`lamellume.units` and do no
file I/O; :mod:`lamellume.io` holds every file format; the Snakemake adapters
in ``workflow/scripts`` glue the two together.
"""

__version__ = "0.1.0"
