"""Native module of saltus (PyO3). Use the functions of the saltus package instead."""

from typing import Any, Dict, List, Optional, Tuple

import numpy as np
import numpy.typing as npt

def version() -> str: ...
def price_columns(
    kind: List[Optional[str]],
    spot: Any,
    strike: Any,
    expiry: Any,
    rate: Any,
    vol: Any,
    jump_rate: Any,
    jump_mean: Any,
    jump_vol: Any,
    div_yield: Any = None,
    quantity: Any = None,
    multiplier: Any = None,
    valuation_date: Any = None,
    default_valuation: Optional[str] = None,
    exercise: Any = None,
    pide_tol: Optional[float] = None,
    implied_vol: bool = False,
) -> Dict[str, Any]: ...
def implied_vol(
    kind: List[Optional[str]],
    price: npt.NDArray[np.float64],
    spot: npt.NDArray[np.float64],
    strike: npt.NDArray[np.float64],
    expiry: npt.NDArray[np.float64],
    rate: npt.NDArray[np.float64],
    div_yield: npt.NDArray[np.float64],
) -> Tuple[npt.NDArray[np.float64], List[str]]: ...
def crosscheck_columns(
    kind: Any, spot: Any, strike: Any, expiry: Any, rate: Any, vol: Any, jump_rate: Any,
    jump_mean: Any, jump_vol: Any, div_yield: Any = None, quantity: Any = None,
    multiplier: Any = None, valuation_date: Any = None, default_valuation: Optional[str] = None,
    exercise: Any = None, id: Any = None, paths: int = 1000000, seed: int = 20261201,
    pide_tol: Optional[float] = None,
) -> Dict[str, Any]: ...
def calibrate_csv(quotes: bytes, valuation_date: Optional[str] = None, per_expiry: bool = False,
                  keep_arbitrage: bool = False) -> Tuple[str, str]: ...
