"""Signals inspections sends inside the writing transaction.

``record_submitted`` is sent by every service that stores a session, a check or a service event,
inside its ``transaction.atomic`` block. ``analytics`` connects to it to write an analysis
request in the same transaction (and enqueue it after commit) without inspections importing
analytics.
"""
from django.dispatch import Signal

record_submitted = Signal()  # kwargs: record, vehicle
