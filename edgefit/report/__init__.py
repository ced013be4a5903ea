"""Layer 6: the self-contained HTML report page (:mod:`.html`)."""
from .html import Report, format_interval, format_value

__all__ = ["Report", "format_interval", "format_value"]
