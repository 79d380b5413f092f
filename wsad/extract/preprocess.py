"""Clips -> normalised model inputs: the published preprocessing of the 3D ResNets (resize to
128 x 171 with bilinear interpolation, no antialiasing, rounded back to 8 bits; crop 112 x 112;
scale to [0, 1]; normalise with MEAN / STD), and multi-crop views.

Crops (common practice): 1 = the centre crop; 5 = the four corners and the centre; 10 = those
five and their horizontal flips. The centre crop starts at round((H - 112) / 2),
round((W - 112) / 2) (Python's round, half to even: row 8, column 30 of 128 x 171)."""
from __future__ import annotations

import numpy as np
import torch
import torch.nn.functional as F

from ..errors import WsadError
from .backbones import CROP, MEAN, RESIZE, STD

CROPS = (1, 5, 10)


def crop_boxes(height: int, width: int, size: int, crops: int) -> list[tuple[int, int, bool]]:
    """(top, left, flipped) of each view, in the order they are stored."""
    if crops not in CROPS:
        raise WsadError(f"--crops {crops}: use one of {CROPS}")
    centre = (int(round((height - size) / 2)), int(round((width - size) / 2)), False)
    if crops == 1:
        return [centre]
    five = [(0, 0, False), (0, width - size, False), (height - size, 0, False),
            (height - size, width - size, False), centre]
    return five if crops == 5 else five + [(t, le, True) for t, le, _ in five]


def resize_clip(frames: np.ndarray) -> torch.Tensor:
    """``[T, H, W, 3]`` uint8 -> ``[T, 3, 128, 171]`` float holding 8-bit values."""
    x = torch.from_numpy(np.ascontiguousarray(frames)).permute(0, 3, 1, 2).float()
    if tuple(x.shape[-2:]) != RESIZE:
        x = F.interpolate(x, size=RESIZE, mode="bilinear", align_corners=False, antialias=False)
        x = x.round().clamp_(0, 255)
    return x


_MEAN = torch.tensor(MEAN).view(1, 3, 1, 1)
_STD = torch.tensor(STD).view(1, 3, 1, 1)


def prepare_clip(frames: np.ndarray, crops: int = 1) -> torch.Tensor:
    """``[16, H, W, 3]`` uint8 -> ``[crops, 3, 16, 112, 112]`` float32 model inputs."""
    x = resize_clip(frames)
    views = []
    for top, left, flipped in crop_boxes(RESIZE[0], RESIZE[1], CROP, crops):
        v = x[:, :, top:top + CROP, left:left + CROP]
        if flipped:
            v = v.flip(-1)
        views.append(((v / 255.0 - _MEAN) / _STD).permute(1, 0, 2, 3))
    return torch.stack(views)
