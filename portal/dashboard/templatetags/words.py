"""``{{ code|words:"vocabulary" }}``: a code in plain words (portal/words.py)."""

from django import template

from portal.words import words as _words

register = template.Library()


@register.filter
def words(code, vocabulary):
    return _words(code, vocabulary)
