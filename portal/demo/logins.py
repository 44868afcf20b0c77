"""The demo's log-ins file, in words."""

from portal.accounts.models import STUDY_WIDE_ROLES, Role


def login_lines(logins, study_name):
    """The log-ins file's lines from (username, role, site slug or None, password): each
    role in words with what it reaches, so a study-wide role is not read as one site's."""
    lines = ["Demo log-ins (new passwords on every run; invented people, invented data):"]
    for username, role, site_slug, password in logins:
        words = Role(role).label
        if role == Role.OPERATOR:
            reach = "everything, including the operator pages"
        elif role in STUDY_WIDE_ROLES:
            reach = f"all sites of the study {study_name}"
            if role == Role.AUDITOR:
                reach += ", read only"
        else:
            reach = f"site {site_slug} only"
        lines.append(f"  {username:<28} {password:<14} {words} \u2014 {reach}")
    return lines
