"""The 3D ResNets of Tran et al., "A Closer Look at Spatiotemporal Convolutions for Action
Recognition" (CVPR 2018), written here with the module layout of their published Kinetics-400
weight files (torchvision's model zoo), so those files load as they are:

- ``r3d_18``: 3 x 3 x 3 convolutions throughout;
- ``mc3_18``: mixed convolutions, 3D in the stem and the first stage, 2D (1 x 3 x 3) after;
- ``r2plus1d_18``: every 3D convolution factorised into a spatial (1 x 3 x 3) and a temporal
  (3 x 1 x 1) one, with the intermediate width M = floor(27 N_in N_out / (9 N_in + 3 N_out))
  that keeps the parameter count of the 3D version (the paper's eq. 5).

Each is a stem, four stages of two residual blocks (64, 128, 256, 512 channels; stages 2-4 halve
the resolution), global average pooling and a 400-way classifier. :func:`build_backbone` returns
the network; its :meth:`VideoResNet.features` gives the 512-d pooled vector wsad stores per segment.

Input: ``[N, 3, 16, 112, 112]`` clips, RGB in [0, 1] normalised with :data:`MEAN` / :data:`STD`.
"""
from __future__ import annotations

import warnings
from collections.abc import Callable
from pathlib import Path

import torch
from torch import nn

from ..errors import WsadError

#: The published preprocessing of these weights (torchvision's model docs, from memory).
MEAN = (0.43216, 0.394666, 0.37645)
STD = (0.22803, 0.22145, 0.216989)
RESIZE = (128, 171)   # height, width
CROP = 112
CLIP_FRAMES = 16
FEATURE_DIM = 512

#: A convolution builder: (in channels, out channels, spatial stride, intermediate width) -> module.
Conv = Callable[[int, int, int, int], nn.Module]


def _conv3d(cin: int, cout: int, stride: int, mid: int) -> nn.Module:
    return nn.Conv3d(cin, cout, (3, 3, 3), stride=stride, padding=1, bias=False)


def _conv2d_in_time(cin: int, cout: int, stride: int, mid: int) -> nn.Module:
    return nn.Conv3d(cin, cout, (1, 3, 3), stride=(1, stride, stride), padding=(0, 1, 1), bias=False)


def _conv2plus1d(cin: int, cout: int, stride: int, mid: int) -> nn.Module:
    return nn.Sequential(
        nn.Conv3d(cin, mid, (1, 3, 3), stride=(1, stride, stride), padding=(0, 1, 1), bias=False),
        nn.BatchNorm3d(mid), nn.ReLU(inplace=True),
        nn.Conv3d(mid, cout, (3, 1, 1), stride=(stride, 1, 1), padding=(1, 0, 0), bias=False))


class ResidualBlock(nn.Module):
    """Two convolutions with batch norm, and the identity (or a strided 1 x 1 x 1 projection)."""

    def __init__(self, cin: int, cout: int, stride: int, conv: Conv, temporal_stride: bool):
        super().__init__()
        mid = (cin * cout * 27) // (cin * 9 + 3 * cout)   # used by the factorised convolution only
        self.conv1 = nn.Sequential(conv(cin, cout, stride, mid), nn.BatchNorm3d(cout), nn.ReLU(inplace=True))
        self.conv2 = nn.Sequential(conv(cout, cout, 1, mid), nn.BatchNorm3d(cout))
        self.relu = nn.ReLU(inplace=True)
        self.downsample = None
        if stride != 1 or cin != cout:
            s = (stride if temporal_stride else 1, stride, stride)
            self.downsample = nn.Sequential(nn.Conv3d(cin, cout, 1, stride=s, bias=False), nn.BatchNorm3d(cout))

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        identity = x if self.downsample is None else self.downsample(x)
        return self.relu(self.conv2(self.conv1(x)) + identity)


class VideoResNet(nn.Module):
    """Stem, four stages, pooling, classifier (see the module docstring)."""

    def __init__(self, stem: nn.Module, convs: list[Conv],
                 temporal_strides: list[bool], num_classes: int = 400):
        super().__init__()
        self.stem = stem
        widths, cin = (64, 128, 256, 512), 64
        for i, (width, conv, tstride) in enumerate(zip(widths, convs, temporal_strides)):
            stride = 1 if i == 0 else 2
            blocks = [ResidualBlock(cin, width, stride, conv, tstride), ResidualBlock(width, width, 1, conv, tstride)]
            setattr(self, f"layer{i + 1}", nn.Sequential(*blocks))
            cin = width
        self.avgpool = nn.AdaptiveAvgPool3d((1, 1, 1))
        self.fc = nn.Linear(FEATURE_DIM, num_classes)
        for m in self.modules():   # He initialisation for convolutions (the usual ResNet choice)
            if isinstance(m, nn.Conv3d):
                nn.init.kaiming_normal_(m.weight, mode="fan_out", nonlinearity="relu")
            elif isinstance(m, nn.BatchNorm3d):
                nn.init.ones_(m.weight)
                nn.init.zeros_(m.bias)
            elif isinstance(m, nn.Linear):
                nn.init.normal_(m.weight, 0, 0.01)
                nn.init.zeros_(m.bias)

    def features(self, x: torch.Tensor) -> torch.Tensor:
        """``[N, 3, T, H, W]`` -> the pooled ``[N, 512]`` vectors (before the classifier)."""
        x = self.stem(x)
        for i in range(1, 5):
            x = getattr(self, f"layer{i}")(x)
        return self.avgpool(x).flatten(1)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.fc(self.features(x))


def _stem_3d() -> nn.Module:
    return nn.Sequential(nn.Conv3d(3, 64, (3, 7, 7), stride=(1, 2, 2), padding=(1, 3, 3), bias=False),
                         nn.BatchNorm3d(64), nn.ReLU(inplace=True))


def _stem_2plus1d() -> nn.Module:
    return nn.Sequential(nn.Conv3d(3, 45, (1, 7, 7), stride=(1, 2, 2), padding=(0, 3, 3), bias=False),
                         nn.BatchNorm3d(45), nn.ReLU(inplace=True),
                         nn.Conv3d(45, 64, (3, 1, 1), stride=1, padding=(1, 0, 0), bias=False),
                         nn.BatchNorm3d(64), nn.ReLU(inplace=True))


def r3d_18() -> VideoResNet:
    return VideoResNet(_stem_3d(), [_conv3d] * 4, [True] * 4)


def mc3_18() -> VideoResNet:
    return VideoResNet(_stem_3d(), [_conv3d] + [_conv2d_in_time] * 3, [True, False, False, False])


def r2plus1d_18() -> VideoResNet:
    return VideoResNet(_stem_2plus1d(), [_conv2plus1d] * 4, [True] * 4)


#: name -> constructor; every list of known backbones derives from it.
BACKBONES: dict[str, Callable[[], VideoResNet]] = {"r3d_18": r3d_18, "mc3_18": mc3_18, "r2plus1d_18": r2plus1d_18}

#: The published Kinetics-400 weight files (torchvision's model zoo).
WEIGHT_URLS = {"r3d_18": "https://download.pytorch.org/models/r3d_18-b3b3357e.pth",
               "mc3_18": "https://download.pytorch.org/models/mc3_18-a90a0ba3.pth",
               "r2plus1d_18": "https://download.pytorch.org/models/r2plus1d_18-91a641e6.pth"}


def build_backbone(name: str, weights: str = "default") -> VideoResNet:
    """The backbone ``name`` in eval mode with ``weights``: ``default`` (the published Kinetics-400
    file, fetched once into torch's hub cache), a path to a state dict (loaded with
    ``weights_only=True``), or ``none`` (random initialisation, the same in every process:
    features without meaning, for tests and dry runs only; warns)."""
    if name not in BACKBONES:
        raise WsadError(f"--backbone {name}: unknown; known: {', '.join(BACKBONES)}")
    if weights == "none":   # seeded: every process (every shard) draws the same random network
        with torch.random.fork_rng():
            torch.manual_seed(0)
            model = BACKBONES[name]()
    else:
        model = BACKBONES[name]()
    if weights == "none":
        warnings.warn(f"{name} with random weights (--weights none): the features mean nothing; use "
                      "--weights default (the published Kinetics-400 file) for real work", stacklevel=2)
    elif weights == "default":
        try:
            state = torch.hub.load_state_dict_from_url(WEIGHT_URLS[name], progress=True, check_hash=True,
                                                       weights_only=True)
        except Exception as err:  # noqa: BLE001 - no network, a proxy, a bad cache: one line
            raise WsadError(f"could not fetch the published {name} weights ({type(err).__name__}: {err}); "
                            f"download {WEIGHT_URLS[name]} elsewhere and pass --weights PATH") from None
        model.load_state_dict(state)
    else:
        model.load_state_dict(load_state_file(Path(weights)))
    return model.eval()


def load_state_file(path: Path) -> dict:
    """A state dict from ``path``, refusing anything but tensors and plain containers."""
    if not path.is_file():
        raise WsadError(f"--weights {path}: no such file (or use default / none)")
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as err:  # noqa: BLE001 - pickle refusals come in several types
        raise WsadError(f"--weights {path}: refused to load ({type(err).__name__}); only plain state dicts "
                        "are read (weights_only=True), never arbitrary pickled objects") from None
    if isinstance(state, dict) and "state_dict" in state and isinstance(state["state_dict"], dict):
        state = state["state_dict"]
    if not isinstance(state, dict):
        raise WsadError(f"--weights {path}: holds a {type(state).__name__}, not a state dict")
    return state
