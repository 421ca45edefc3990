"""flakelight: screening layered compounds for bright, strongly bound excitons.

The package is a plain Python library. Physics modules take and return numbers
or numpy arrays in the internal unit system of :mod:`flakelight.units` and do no
file I/O; :mod:`flakelight.io` holds every file format; the Snakemake adapters
in ``workflow/scripts`` glue the two together.
"""

__version__ = "0.1.0"

#: Library modules the per-shard screen depends on. Their content hash is the
#: ``code_version`` stamped on shard rows and keys the per-record cache; the
#: workflow declares the same files as inputs of the shard rule.
SHARD_MODULES = (
    "__init__", "units", "io", "contract", "sharding", "structure", "bandfit", "dielectric",
    "masses", "hydrogenic", "keldysh", "layers", "survival", "ingest", "screen", "pipeline",
)

#: Library modules the per-shard uncertainty propagation depends on (its cache key).
PROPAGATION_MODULES = (
    "__init__", "units", "io", "ingest", "dielectric", "hydrogenic", "keldysh", "layers",
    "masses", "survival", "uncertainty", "pipeline",
)

#: Library modules the per-shard attribution (rule attribute_shard) depends on (its cache key).
REFINEMENT_MODULES = PROPAGATION_MODULES + ("attribution", "refinement")
