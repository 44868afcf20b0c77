from django import forms

from portal.quality.models import ChannelStatus
from portal.studies.protocol import QC_FIELDS


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
    """Run the checks again with other thresholds (the study's settings are the starting point)."""

    def __init__(self, *args, initial_settings, **kwargs):
        super().__init__(*args, **kwargs)
        for key, label in QC_FIELDS.items():
            self.fields[key] = forms.FloatField(label=label[0].upper() + label[1:],
                                                initial=initial_settings.get(key), min_value=0)
