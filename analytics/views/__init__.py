"""Manager's and owner's pages. Views check access, validate a form and call a service."""
from .fleet import fleet
from .owner import advice_pdf, mine
from .vehicle import advice_action, vehicle

__all__ = ["fleet", "vehicle", "advice_action", "mine", "advice_pdf"]
