"""From footage to features: decoding (:mod:`.decode`), the published preprocessing
(:mod:`.preprocess`), the 3D ResNet backbones (:mod:`.backbones`), the streaming pipeline of one
video (:mod:`.pipeline`) and of a folder (:mod:`.folder`). Needs the ``video`` extra (PyAV)."""
from .backbones import BACKBONES, FEATURE_DIM, build_backbone
from .folder import Settings, extract_folder
from .pipeline import Extracted, extract_video

__all__ = ["BACKBONES", "FEATURE_DIM", "build_backbone", "Settings", "extract_folder", "Extracted", "extract_video"]
