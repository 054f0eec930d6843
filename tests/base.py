"""Base test case with the personas every access test uses (see ``factories.make_personas``)."""
from __future__ import annotations

from django.test import TestCase

from tests import factories as f


class PersonaTestCase(TestCase):
    @classmethod
    def setUpTestData(cls):
        f.make_personas(cls)
