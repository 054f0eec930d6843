"""The form of the CSV import page: one file, checked for size here and for content by the importer."""
from __future__ import annotations

from pathlib import PurePath

from django import forms
from django.core.exceptions import ValidationError

from . import importing


class ImportForm(forms.Form):
    file = forms.FileField(label="CSV file", help_text="UTF-8 (a byte-order mark is fine), header row first")
    check_only = forms.BooleanField(required=False, label="Only check the file, store nothing")

    def clean_file(self):
        upload = self.cleaned_data["file"]
        limit = importing.MAX_FILE_BYTES
        if upload.size > limit:
            raise ValidationError(f"{upload.name} is {upload.size / 1e6:.1f} MB; at most "
                                  f"{limit / 1e6:.0f} MB per import")
        return upload

    def filename(self) -> str:
        return PurePath(self.cleaned_data["file"].name or "upload.csv").name[:120]
