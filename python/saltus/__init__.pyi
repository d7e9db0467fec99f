"""Type hints of the saltus package (see the module docstring of saltus/__init__.py)."""

from typing import Any, List, Optional, Tuple

import numpy as np
import numpy.typing as npt

__version__: str
RESULT_COLUMNS: List[str]
CHECK_COLUMNS: List[str]

class BookError(ValueError): ...

def price(frame: Any, *, implied_vol: bool = ..., valuation_date: Any = ...,
          pide_tol: Optional[float] = ...) -> Any:
    """Prices every row of a book (pandas DataFrame, dict of arrays or pyarrow
    Table); returns the same kind of object with the result columns appended."""

def implied_vol(
    kind: Any,
    price: npt.ArrayLike,
    spot: npt.ArrayLike,
    strike: npt.ArrayLike,
    expiry: npt.ArrayLike,
    rate: npt.ArrayLike,
    div_yield: npt.ArrayLike = ...,
) -> Tuple[npt.NDArray[np.float64], List[str]]:
    """Black-Scholes implied volatilities; NaN with a reason where there is none."""

def crosscheck(frame: Any, *, paths: int = ..., seed: int = ...,
               pide_tol: Optional[float] = ...) -> Any:
    """Re-prices every row with Fourier, Monte Carlo and the PIDE and compares
    each with the series, as `saltus crosscheck` does."""

def calibrate(quotes: Any, *, valuation_date: Any = ..., per_expiry: bool = ...,
              keep_arbitrage: bool = ...) -> Tuple[Any, Any]:
    """Fits the Merton parameters per underlying to a quote sheet as
    `saltus calibrate` does; returns (params, residuals) DataFrames."""
