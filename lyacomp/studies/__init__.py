"""Studies that call the batch evaluator: robustness, design optimization, maps, checks."""

from lyacomp.studies.optimize import DesignPointError as DesignPointError
from lyacomp.studies.optimize import DesignSpace as DesignSpace
from lyacomp.studies.optimize import OutputFunction as OutputFunction
from lyacomp.studies.optimize import RobustStatistic as RobustStatistic
from lyacomp.studies.robustness import RobustnessResult as RobustnessResult
from lyacomp.studies.robustness import rank_drivers as rank_drivers
from lyacomp.studies.robustness import run_robustness as run_robustness
from lyacomp.studies.robustness import wilson_interval as wilson_interval
from lyacomp.studies.uncertainty import UncertaintySpec as UncertaintySpec
from lyacomp.studies.uncertainty import parse_uncertainty as parse_uncertainty
from lyacomp.studies.uncertainty import sample as sample
