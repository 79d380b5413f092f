"""torchvision's video ResNets as a reference implementation, without importing torchvision.

The registry's torchvision wheels link CUDA libraries, so ``import torchvision`` fails beside the
CPU torch this project installs ("operator torchvision::nms does not exist"). Its model file
(``torchvision/models/video/resnet.py``) is plain PyTorch: it is loaded here on its own, with
minimal stand-ins for the package modules it imports (weights metadata, logging), and removed
from ``sys.modules`` again afterwards."""
from __future__ import annotations

import enum
import importlib.util
import sys
import types
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path


def torchvision_dir() -> Path | None:
    spec = importlib.util.find_spec("torchvision")
    return Path(spec.submodule_search_locations[0]) if spec and spec.submodule_search_locations else None


@contextmanager
def reference_video_resnets():
    """Yields torchvision's ``models/video/resnet.py`` as a module (r3d_18, mc3_18, r2plus1d_18)."""
    root = torchvision_dir()
    if root is None:
        raise RuntimeError("torchvision is not installed (make setup installs it for the tests)")
    saved = {k: v for k, v in sys.modules.items() if k == "torchvision" or k.startswith("torchvision.")}
    for k in saved:
        del sys.modules[k]

    def package(name: str, path: Path | None = None) -> types.ModuleType:
        m = types.ModuleType(name)
        m.__path__ = [str(path)] if path else []
        sys.modules[name] = m
        return m

    @dataclass
    class Weights:
        url: str
        transforms: object
        meta: dict

    class WeightsEnum(enum.Enum):
        url = property(lambda self: self.value.url)

        @classmethod
        def verify(cls, weights):
            return weights   # only weights=None (random initialisation) is used here

    try:
        package("torchvision", root)
        package("torchvision.models", root / "models")
        package("torchvision.models.video", root / "models" / "video")
        package("torchvision.transforms", root / "transforms")
        package("torchvision.transforms._presets").VideoClassification = object
        package("torchvision.utils")._log_api_usage_once = lambda obj: None
        api = package("torchvision.models._api")
        api.register_model, api.Weights, api.WeightsEnum = (lambda name=None: (lambda f: f)), Weights, WeightsEnum
        package("torchvision.models._meta")._KINETICS400_CATEGORIES = [f"class{i}" for i in range(400)]
        utils = package("torchvision.models._utils")
        utils.handle_legacy_interface = lambda **kw: (lambda f: f)
        utils._ovewrite_named_param = lambda kwargs, name, value: kwargs.setdefault(name, value)
        utils._ModelURLs = dict
        spec = importlib.util.spec_from_file_location("torchvision.models.video.resnet",
                                                      root / "models" / "video" / "resnet.py")
        module = importlib.util.module_from_spec(spec)
        sys.modules[spec.name] = module
        spec.loader.exec_module(module)
        yield module
    finally:
        for k in [k for k in sys.modules if k == "torchvision" or k.startswith("torchvision.")]:
            del sys.modules[k]
        sys.modules.update(saved)
