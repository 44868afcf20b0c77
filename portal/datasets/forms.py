from django import forms

from portal.datasets.models import UploadMode


class UploadForm(forms.Form):
    """What accompanies the files: the study and whether they replace or add to the dataset."""

    study = forms.ChoiceField(label="Study")
    mode = forms.ChoiceField(
        choices=UploadMode.choices, initial=UploadMode.SNAPSHOT, widget=forms.RadioSelect,
        label="These files are",
    )

    def __init__(self, *args, studies, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["study"].choices = [(s.slug, s.name) for s in studies]
