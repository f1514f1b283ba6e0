"""Before and after a training: the comparison of phases (``calibrate compare``)."""

__all__: list[str] = []
