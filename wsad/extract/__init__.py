"""From footage to features: decoding (:mod:`.decode`), the published preprocessing
(:mod:`.preprocess`), the 3D ResNet backbones (:mod:`.backbones`), the streaming pipeline of one
video (:mod:`.pipeline`) and of a folder (:mod:`.folder`). Needs the ``video`` extra (PyAV)."""
from .backbones import BACKBONES, FEATURE_DIM, build_backbone
from .folder import Settings, extract_folder
from .pipeline import Extracted, extract_video

__all__ = ["BACKBONES", "FEATURE_DIM", "build_backbone", "Settings", "extract_folder", "Extracted", "extract_video",
           "extract_videos"]


def extract_videos(videos, out, backbone: str = "r3d_18", weights: str = "default", crops: int = 1,
                   fps: float | None = None, labels=None, events=None, batch: int = 8, progress: bool = True):
    """What ``wsad-extract VIDEOS --out OUT`` does, from Python: segment features of every video
    under ``videos`` (``VIDEOS/<camera>/<file>`` gives group = camera) into ``out``; with
    ``labels`` (CSV video,label,split[,group]) a ready store there. ``weights``: ``default`` (the
    published Kinetics-400 file), a state-dict path, or ``none`` (random: meaningless features).
    Returns the outcome (``.done``, ``.skipped``, ``.failed``, ``.store``)."""
    model = build_backbone(backbone, weights)
    return extract_folder(videos, out, model, Settings(backbone, weights, crops, fps), batch,
                          labels=labels, events=events, progress=progress)
