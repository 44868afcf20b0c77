"""A study's protocol: read it, see its history, and (study lead) change it."""

from django.contrib import messages
from django.shortcuts import redirect, render

from portal.accounts.permissions import Action, access, can, get_visible_study, require
from portal.studies.forms import ProtocolForm
from portal.studies.models import current_protocol, save_protocol
from portal.studies.protocol import DEFAULT_PROTOCOL


@access("checked")
def protocol(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    current = current_protocol(study)
    history = study.protocol_versions.select_related("created_by")[:50]
    return render(request, "studies/protocol.html", {
        "study": study, "version": current, "p": current.data, "history": history,
        "f": {**DEFAULT_PROTOCOL["features"], **current.data.get("features", {})},
        "may_edit": can(request.user, Action.EDIT_PROTOCOL, study=study),
    })


@access("checked")
def protocol_edit(request, study_slug):
    study = get_visible_study(request.user, study_slug)
    require(request.user, Action.EDIT_PROTOCOL, study=study)
    current = current_protocol(study)
    form = ProtocolForm(request.POST or None, protocol=current.data)
    if request.method == "POST" and form.is_valid():
        version = save_protocol(study, form.cleaned_data["protocol"], user=request.user,
                                note=form.cleaned_data["note"])
        if version.pk == current.pk:
            messages.info(request, "Nothing changed; the protocol stays at version "
                                   f"{current.number}.")
        else:
            messages.success(request, f"Saved as protocol version {version.number}.")
        return redirect("studies:protocol", study_slug=study.slug)
    return render(request, "studies/protocol_edit.html",
                  {"study": study, "form": form, "version": current})
