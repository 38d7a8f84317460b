"""The study: a validated study file resolved into priors and analysis sections.

The submodules hold the code; this package re-exports their public names.
"""

from uncertainty.forms.catalogue import (  # noqa: F401
    INPUT_ORDER,
    NO_LYMPH,
    OPTIONAL_INPUTS,
    OUTPUT_ONLY,
    REQUIRED_INPUTS,
    SOLVED,
    TISSUE_INPUTS,
    TISSUE_OPTIONAL,
    TISSUE_OUTPUTS,
    TISSUE_UNUSED,
    form,
    optional_inputs,
    output_names,
    outputs,
    required_inputs,
    study_outputs,
)
from uncertainty.study.data_files import (  # noqa: F401
    DataColumns,
    data_notes,
    read_csv,
)
from uncertainty.study.resolve import (  # noqa: F401
    StudyInput,
)
from uncertainty.study.schema import (  # noqa: F401
    CSV_COLUMNS,
    OBS_NEEDS,
    OBS_SYMBOL,
    OBS_SYMBOL_HOW,
    SECTIONS,
    STRICT_CONFIG,
    TEXT_COLUMNS,
    TIME_COLUMNS,
    TIME_UNITS,
    TOP_LEVEL,
    CalibrateSection,
    Candidate,
    ColumnMap,
    CorrelationsSection,
    DesignSection,
    Effect,
    InferSection,
    Intervention,
    InterventionList,
    Number,
    Observation,
    PropagateSection,
    RankSection,
    Responder,
    Scenario,
    ScenarioChange,
    ScheduleSection,
    SensitivitySection,
    Spread,
    StepSpec,
    StudySection,
    Threshold,
    TimeColumn,
    TimelineSection,
    obs_symbol,
)
from uncertainty.study.study import (  # noqa: F401
    Study,
    load_study,
    resolved_rows,
)
