"""Before and after the season: planning the rating exercise, collecting the packets,
scoring new files with a captured policy."""

__all__: list[str] = []
