from django import forms

from portal.quality.models import ChannelStatus
from portal.studies.protocol import QC_FIELDS, qc_problems


class OverrideForm(forms.Form):
    channel = forms.ChoiceField(label="Channel")
    status = forms.ChoiceField(choices=ChannelStatus.choices, widget=forms.RadioSelect,
                               label="Set it")
    reason = forms.CharField(max_length=300, label="Why?",
                             help_text="Kept in the audit trail, e.g. 'electrode re-gelled at "
                                       "minute 3; signal fine after'.")

    def __init__(self, *args, channels, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["channel"].choices = [(c, c) for c in channels]


class RerunForm(forms.Form):
    """Run the checks again with other thresholds (the study's settings are the starting
    point); the thresholds are checked by the science's limits (QCSettings) on their fields."""

    def __init__(self, *args, initial_settings, **kwargs):
        super().__init__(*args, **kwargs)
        self.initial_settings = dict(initial_settings)
        for key, label in QC_FIELDS.items():
            self.fields[key] = forms.FloatField(label=label[0].upper() + label[1:],
                                                initial=initial_settings.get(key))

    def clean(self):
        data = super().clean()
        if self.errors:
            return data
        merged = {**self.initial_settings, **{key: data[key] for key in QC_FIELDS}}
        for field, messages in qc_problems(merged).items():
            for message in messages:
                self.add_error(field if field in self.fields else None, message)
        return data
