"""What the samples are for: sample ids, soil cores, crop profiles, labels and lab sheets.

The stage itself is :func:`fieldplan.samples.purpose.apply_purpose`; submodules are
imported where needed so that ``fieldplan --help`` stays fast.
"""

__all__: list[str] = []
