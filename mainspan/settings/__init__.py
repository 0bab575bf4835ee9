"""The one settings schema: every plan setting declared once.

Each :class:`Setting` names its project-file section and key, its kind,
unit, default, bounds or choices and help text.  From this one list come

* the ``mainspan plan`` / ``mainspan check`` options (flag = the key with
  dashes; a section's primary key takes the section's name: ``--sites``,
  ``--crs``, ``--candidates``, ``--output``), with the older spellings kept as
  hidden aliases;
* the project-file keys and their checks (:mod:`mainspan.settings.project`);
* the ``run_info`` entries that record the settings of a run;
* the ``--help`` text, which lists every design key with its unit and default.

The ``costs`` and ``design`` sections are derived from the
:class:`~mainspan.ground.costs.CostWeights` and
:class:`~mainspan.hydraulics.DesignSettings` dataclass fields: type from the
annotation, default from the field, help (and unit where the name does not
carry one) from the class's numpydoc docstring.  A setting added there
appears everywhere without a further edit; any other setting is one
:class:`Setting` line in :data:`STATIC_SETTINGS`.

Every value is checked here, before any work, with one message template::

    <where>: <what> must be <expected>, got <value>; <fix>

and so are the rules that tie settings together (:func:`check_settings`).

Examples
--------
>>> s = setting("design", "velocity_max_mps")
>>> s.option, s.unit, s.default
('--velocity-max-mps', 'm/s', 1.5)
>>> parse_text(setting("candidates", "k"), "6", "option --k")
6
>>> parse_text(s, "fast", "option --design velocity_max_mps")
Traceback (most recent call last):
...
mainspan.errors.InputError: option --design velocity_max_mps: the velocity cap must be a number > 0 in m/s, got 'fast'; give a number such as velocity_max_mps=1.5
"""

from __future__ import annotations

from .checks import (check_settings, check_value, design_settings, parse_items,  # noqa: F401
                     parse_text)
from .plan import PlanSettings, run_info_params  # noqa: F401
from .schema import (LAYOUTS, SECTIONS, STATIC_SETTINGS, Setting, all_settings,  # noqa: F401
                     bad_value, by_flag, design_help, format_default, setting, unknown_key)

__all__ = ["Setting", "STATIC_SETTINGS", "SECTIONS", "LAYOUTS", "all_settings", "setting",
           "by_flag", "parse_text", "parse_items", "check_value", "check_settings", "unknown_key",
           "bad_value", "run_info_params", "design_help", "format_default", "design_settings",
           "PlanSettings"]
