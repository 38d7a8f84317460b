"""Priors: declarations, derived quantities, the library of prior sets, conditions and instruments.

The submodules hold the code; this package re-exports their public names.
"""

from uncertainty.priors.conditions import (  # noqa: F401
    Condition,
    Modifier,
    load_conditions,
)
from uncertainty.priors.declarations import (  # noqa: F401
    DISTRIBUTIONS,
    LOCATION_PARAMS,
    LOGIT_LAYER,
    META_KEYS,
    NEGLIGIBLE_MASS,
    POSITIVE,
    PROTEIN_INPUTS,
    PURE_PARAMS,
    SCALE_PARAMS,
    UNIT_INTERVAL,
    ZERO_ALLOWED,
    Context,
    PointMass,
    Prior,
    convert_unit,
    fmt_number,
    frozen_distribution,
    is_number,
    join_key,
    number_in_unit,
    parse_prior,
    unit_info,
)
from uncertainty.priors.derived import (  # noqa: F401
    DERIVATION_RULES,
    WIDENED_INPUT,
    Derivation,
    capacity_forces,
    hold_capacity,
    parse_derived,
)
from uncertainty.priors.instruments import (  # noqa: F401
    Instrument,
    load_instruments,
)
from uncertainty.priors.library import (  # noqa: F401
    PriorSet,
    canonical_unit,
    correlation_matrix,
    data_dir,
    list_prior_sets,
    load_prior_set,
    parse_entry,
    prior_medians,
    prior_rows,
    prior_set_from_dict,
)
