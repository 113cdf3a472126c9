"""Studies that call the batch evaluator: robustness, design optimization, maps, checks."""

from lyacomp.studies.demo import run_demo as run_demo
from lyacomp.studies.maps import Axis as Axis
from lyacomp.studies.maps import ParameterMap as ParameterMap
from lyacomp.studies.maps import PointClass as PointClass
from lyacomp.studies.maps import Switch as Switch
from lyacomp.studies.maps import find_switches as find_switches
from lyacomp.studies.maps import parameter_map as parameter_map
from lyacomp.studies.optimize import DesignPointError as DesignPointError
from lyacomp.studies.optimize import DesignSpace as DesignSpace
from lyacomp.studies.optimize import OutputFunction as OutputFunction
from lyacomp.studies.optimize import RobustStatistic as RobustStatistic
from lyacomp.studies.plots_maps import plot_map as plot_map
from lyacomp.studies.plots_verify import plot_simulation_check as plot_simulation_check
from lyacomp.studies.robustness import RobustnessResult as RobustnessResult
from lyacomp.studies.robustness import rank_drivers as rank_drivers
from lyacomp.studies.robustness import run_robustness as run_robustness
from lyacomp.studies.robustness import wilson_interval as wilson_interval
from lyacomp.studies.uncertainty import UncertaintySpec as UncertaintySpec
from lyacomp.studies.uncertainty import parse_uncertainty as parse_uncertainty
from lyacomp.studies.uncertainty import sample as sample
from lyacomp.studies.verify import SimulationCheck as SimulationCheck
from lyacomp.studies.verify import check_by_simulation as check_by_simulation
