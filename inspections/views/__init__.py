"""Technician views (part 1 of the people-facing product): pages and the JSON submit endpoints."""
from .pages import bay, bay_vehicle, home, service_worker, session_correction, session_detail, session_new
from .submit import session_correct, session_submit

__all__ = ["bay", "bay_vehicle", "home", "service_worker", "session_correct", "session_correction",
           "session_detail", "session_new", "session_submit"]
