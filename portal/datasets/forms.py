from django import forms

from portal.datasets.models import UploadMode

#: One line each on what the two kinds of upload do, shown beside the choice.
MODE_CHOICES = [
    (UploadMode.ADDITION, "Add to the dataset: new or corrected files are added to the latest "
                          "version; nothing already stored is removed."),
    (UploadMode.SNAPSHOT, "Replace the whole dataset: files and participants not in this upload "
                          "leave the new version (you are shown what and asked to confirm)."),
]


class UploadForm(forms.Form):
    """What accompanies the files: the study and whether they add to or replace the dataset."""

    study = forms.ChoiceField(label="Study")
    mode = forms.ChoiceField(
        choices=MODE_CHOICES, initial=UploadMode.ADDITION, widget=forms.RadioSelect,
        label="What these files are",
    )

    def __init__(self, *args, studies, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["study"].choices = [(s.slug, s.name) for s in studies]
