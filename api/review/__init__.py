"""Reviews of patient doses against diagnostic reference levels: the computational core.

Pure functions over pandas DataFrames, no database. The pieces:

* :mod:`.examtypes`: the exam-type catalogue and the rules that map raw header values to it (and
  to a clinical indication);
* :mod:`.bands`: the paediatric patient groups (ICRP 135, EC RP 185 weight and age bands);
* :mod:`.levels`: local and national reference-level sets, versioned, with their CSV files;
* :mod:`.stats`: group statistics, confidence intervals of the median and of any quantile, ICRP 135
  minimum and preferred samples;
* :mod:`.site_values`: ICRP 135 typical values and proposed local DRLs over a site's rooms;
* :mod:`.changepoint`: CUSUM change-points in monthly series;
* :mod:`.flags`: the flags, each with its reason and numbers;
* :mod:`.events`: the events table contract and the examination values derived from it;
* :mod:`.run`: :func:`review`, its parameters and its reproducible result.

Every figure is an estimate for quality assurance and optimisation; clinical decisions need a
qualified medical physicist, and local regulations take precedence.
"""

from typing import TYPE_CHECKING

from beamaudit import lazy_exports

if TYPE_CHECKING:
    from beamaudit.api.review.bands import (
        PatientGroup,
        PatientGroups,
        load_default_patient_groups,
        read_patient_groups_csv,
        write_patient_groups_csv,
    )
    from beamaudit.api.review.errors import CsvFormatError, ReviewError, ReviewInputError
    from beamaudit.api.review.events import EVENT_COLUMNS, prepare_events
    from beamaudit.api.review.examtypes import (
        ExamCatalogue,
        ExamType,
        MappingRule,
        MappingRules,
        load_default_catalogue,
        load_default_rules,
        map_events,
        map_events_with_indication,
        match_rules,
        read_catalogue_csv,
        read_rules_csv,
        unmapped_summary,
        write_catalogue_csv,
        write_rules_csv,
    )
    from beamaudit.api.review.flags import Flag
    from beamaudit.api.review.levels import (
        AppliedLevel,
        LevelEntry,
        ReferenceLevelSet,
        applicable_levels,
        load_demo_local_levels,
        load_mammography_levels,
        load_national_levels,
        read_levels_csv,
        write_levels_csv,
    )
    from beamaudit.api.review.run import (
        GROUP_COLUMNS,
        MONTHLY_COLUMNS,
        Period,
        ReviewParameters,
        ReviewResult,
        review,
    )
    from beamaudit.api.review.site_values import SITE_VALUE_COLUMNS, site_values

#: where each public name lives: imported on first use, so that importing the package (or one
#: of its light modules) does not import the heavy libraries its other modules need
_LAZY: dict[str, str] = {
    "PatientGroup": "beamaudit.api.review.bands",
    "PatientGroups": "beamaudit.api.review.bands",
    "load_default_patient_groups": "beamaudit.api.review.bands",
    "read_patient_groups_csv": "beamaudit.api.review.bands",
    "write_patient_groups_csv": "beamaudit.api.review.bands",
    "CsvFormatError": "beamaudit.api.review.errors",
    "ReviewError": "beamaudit.api.review.errors",
    "ReviewInputError": "beamaudit.api.review.errors",
    "EVENT_COLUMNS": "beamaudit.api.review.events",
    "prepare_events": "beamaudit.api.review.events",
    "ExamCatalogue": "beamaudit.api.review.examtypes",
    "ExamType": "beamaudit.api.review.examtypes",
    "MappingRule": "beamaudit.api.review.examtypes",
    "MappingRules": "beamaudit.api.review.examtypes",
    "load_default_catalogue": "beamaudit.api.review.examtypes",
    "load_default_rules": "beamaudit.api.review.examtypes",
    "map_events": "beamaudit.api.review.examtypes",
    "map_events_with_indication": "beamaudit.api.review.examtypes",
    "match_rules": "beamaudit.api.review.examtypes",
    "read_catalogue_csv": "beamaudit.api.review.examtypes",
    "read_rules_csv": "beamaudit.api.review.examtypes",
    "unmapped_summary": "beamaudit.api.review.examtypes",
    "write_catalogue_csv": "beamaudit.api.review.examtypes",
    "write_rules_csv": "beamaudit.api.review.examtypes",
    "Flag": "beamaudit.api.review.flags",
    "AppliedLevel": "beamaudit.api.review.levels",
    "LevelEntry": "beamaudit.api.review.levels",
    "ReferenceLevelSet": "beamaudit.api.review.levels",
    "applicable_levels": "beamaudit.api.review.levels",
    "load_demo_local_levels": "beamaudit.api.review.levels",
    "load_mammography_levels": "beamaudit.api.review.levels",
    "load_national_levels": "beamaudit.api.review.levels",
    "read_levels_csv": "beamaudit.api.review.levels",
    "write_levels_csv": "beamaudit.api.review.levels",
    "GROUP_COLUMNS": "beamaudit.api.review.run",
    "MONTHLY_COLUMNS": "beamaudit.api.review.run",
    "Period": "beamaudit.api.review.run",
    "ReviewParameters": "beamaudit.api.review.run",
    "ReviewResult": "beamaudit.api.review.run",
    "review": "beamaudit.api.review.run",
    "SITE_VALUE_COLUMNS": "beamaudit.api.review.site_values",
    "site_values": "beamaudit.api.review.site_values",
}

__all__ = [
    "EVENT_COLUMNS",
    "GROUP_COLUMNS",
    "MONTHLY_COLUMNS",
    "SITE_VALUE_COLUMNS",
    "AppliedLevel",
    "CsvFormatError",
    "ExamCatalogue",
    "ExamType",
    "Flag",
    "LevelEntry",
    "MappingRule",
    "MappingRules",
    "PatientGroup",
    "PatientGroups",
    "Period",
    "ReferenceLevelSet",
    "ReviewError",
    "ReviewInputError",
    "ReviewParameters",
    "ReviewResult",
    "applicable_levels",
    "load_default_catalogue",
    "load_default_patient_groups",
    "load_default_rules",
    "load_demo_local_levels",
    "load_mammography_levels",
    "load_national_levels",
    "map_events",
    "map_events_with_indication",
    "match_rules",
    "prepare_events",
    "read_catalogue_csv",
    "read_levels_csv",
    "read_patient_groups_csv",
    "read_rules_csv",
    "review",
    "site_values",
    "unmapped_summary",
    "write_catalogue_csv",
    "write_levels_csv",
    "write_patient_groups_csv",
    "write_rules_csv",
]


__getattr__ = lazy_exports(__name__, _LAZY)
