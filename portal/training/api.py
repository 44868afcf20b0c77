"""Training runs for scripts: POST a spec, GET a run's state and scores."""

import json

from django.http import JsonResponse
from django.views.decorators.http import require_GET, require_http_methods

from portal.accounts.permissions import access, runs_anywhere
from portal.features.access import may_run_on, may_see
from portal.features.models import FeatureSet
from portal.training.access import visible_run
from portal.training.services import TrainingRequestError, run_report, start_run


@access("checked")
@require_http_methods(["POST"])
def create_run(request):
    """POST a spec (format in the README) → 201 with the run's id and state."""
    if not runs_anywhere(request.user):
        return JsonResponse({"errors": {"user": ["your roles do not include starting work"]}},
                            status=403)
    try:
        spec = json.loads(request.body or b"{}")
    except (ValueError, UnicodeDecodeError):
        return JsonResponse({"errors": {"body": ["send the spec as a JSON object"]}},
                            status=400)
    feature_set = (FeatureSet.objects.filter(pk=spec.get("feature_set")).first()
                   if isinstance(spec, dict) and isinstance(spec.get("feature_set"), int)
                   else None)
    if feature_set is not None and not may_see(request.user, feature_set):
        feature_set = None
    if feature_set is None:
        return JsonResponse({"errors": {"feature_set": ["no such feature set"]}}, status=400)
    if not may_run_on(request.user, feature_set):
        return JsonResponse({"errors": {"feature_set": [
            "you may not start work on every site of this feature set"]}}, status=403)
    try:
        run = start_run(spec, user=request.user)
    except TrainingRequestError as exc:
        return JsonResponse({"errors": exc.errors}, status=400)
    return JsonResponse(run_report(run), status=201)


@access("checked")
@require_GET
def run_status(request, training_id):
    run, _ = visible_run(request.user, training_id)
    return JsonResponse(run_report(run))

