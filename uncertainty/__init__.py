"""fluidshift: uncertainty around net capillary filtration (Jv) from the Starling forces.

The Python API for notebooks (each analysis returns a result object with ``to_dict()``,
``to_dataframe()`` and ``plot(out_dir)``)::

    import uncertainty as fs
    study = fs.load_study("studies/demo.toml")
    fs.propagate(study).to_dataframe()

``load_study, propagate, sensitivity, infer, rank, design, run`` are resolved lazily on first use,
so ``import uncertainty`` stays light (no numpy, pymc or matplotlib until an analysis is called).

Several of these names are also submodules (``uncertainty.propagate`` is both the module and its
main function). The package attribute is a callable stand-in that calls the function and passes any
other attribute through to the module, so ``uncertainty.propagate(study)``,
``uncertainty.propagate.PropagateResult`` and ``from uncertainty.propagate import propagate`` all work.
"""

from __future__ import annotations

import functools
import importlib
import sys
import types
from typing import Any

#: API name -> (module, function)
API: dict[str, tuple[str, str]] = {
    "load_study": ("uncertainty.study", "load_study"),
    "propagate": ("uncertainty.propagate", "propagate"),
    "sensitivity": ("uncertainty.sensitivity", "sensitivity"),
    "infer": ("uncertainty.inference", "infer"),
    "rank": ("uncertainty.rank", "rank"),
    "design": ("uncertainty.design", "design"),
    "run": ("uncertainty.run", "run"),
}

__all__ = list(API)


class _ApiFunction:
    """Calls ``module.function``; other attributes are those of the module."""

    def __init__(self, module: types.ModuleType, function: str) -> None:
        object.__setattr__(self, "_module", module)
        object.__setattr__(self, "_function", function)
        functools.update_wrapper(self, getattr(module, function))  # type: ignore[arg-type]

    def __call__(self, *args: Any, **kwargs: Any) -> Any:
        return getattr(self._module, self._function)(*args, **kwargs)

    def __getattr__(self, name: str) -> Any:
        return getattr(object.__getattribute__(self, "_module"), name)

    def __setattr__(self, name: str, value: Any) -> None:
        if name in ("__wrapped__", "__doc__", "__name__", "__qualname__", "__module__", "__dict__",
                    "__annotations__", "__type_params__"):
            object.__setattr__(self, name, value)
        else:
            setattr(self._module, name, value)

    def __dir__(self) -> list[str]:
        return dir(self._module)

    def __repr__(self) -> str:
        return f"<fluidshift API function {self._module.__name__}.{self._function}>"


class _Package(types.ModuleType):
    """The package module: API names resolve lazily and are not overwritten by submodule imports."""

    _api_cache: dict[str, Any]

    def __getattribute__(self, name: str) -> Any:
        if name in API:
            cache = types.ModuleType.__getattribute__(self, "__dict__").setdefault("_api_cache", {})
            if name not in cache:
                module_name, function = API[name]
                module = importlib.import_module(module_name)
                fn = getattr(module, function)
                short = module_name.rpartition(".")[2]
                cache[name] = _ApiFunction(module, function) if short == name else fn
            return cache[name]
        return types.ModuleType.__getattribute__(self, name)

    def __dir__(self) -> list[str]:
        return sorted(set(types.ModuleType.__dir__(self)) | set(API))


sys.modules[__name__].__class__ = _Package
