"""The safety caution carried by every piece of advice, page and report that shows advice."""

CAUTION = (
    "Advisory only. Suspension and steering parts are safety-critical: confirm every item with "
    "the manufacturer's data and a qualified, licensed inspection, and follow local regulations."
)
