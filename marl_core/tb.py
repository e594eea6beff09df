"""TensorBoard helpers: an animated GIF as an image summary, and hparams written into the run's own log.

``SummaryWriter.add_video`` needs an old moviepy and otherwise writes nothing, so episodes are encoded as
GIFs with Pillow and logged as image summaries (TensorBoard's image dashboard shows them animated).
``SummaryWriter.add_hparams`` writes into a new timestamped sub-directory; :func:`add_hparams` writes the
same records into the run directory itself, so TensorBoard's HParams view over a folder of runs shows one
row per run.
"""

from __future__ import annotations

import io
from typing import Any

import numpy as np

from envs.metrics import METRIC_NAMES

__all__ = ["gif_bytes", "add_gif", "add_hparams", "flat_hparams"]


def gif_bytes(frames: list[np.ndarray], fps: int = 8) -> bytes:
    """Frames ((H, W, 3) uint8) encoded as a looping GIF."""
    from PIL import Image

    images = [Image.fromarray(np.asarray(f, np.uint8)) for f in frames]
    buf = io.BytesIO()
    images[0].save(buf, format="GIF", save_all=True, append_images=images[1:],
                   duration=max(1, round(1000 / fps)), loop=0)
    return buf.getvalue()


def add_gif(writer: Any, tag: str, frames: list[np.ndarray], step: int, fps: int = 8) -> None:
    """Log ``frames`` as an animated GIF image summary."""
    from tensorboard.compat.proto.summary_pb2 import Summary

    h, w = frames[0].shape[:2]
    image = Summary.Image(height=h, width=w, colorspace=3, encoded_image_string=gif_bytes(frames, fps))
    writer._get_file_writer().add_summary(Summary(value=[Summary.Value(tag=tag, image=image)]), step)


def flat_hparams(cfg: Any) -> dict[str, Any]:
    """The config as ``section.key -> scalar`` (lists and dicts become strings), for the HParams view."""
    from marl_core.config import config_to_dict

    out: dict[str, Any] = {}

    def walk(prefix: str, value: Any) -> None:
        if isinstance(value, dict):
            for k, v in value.items():
                walk(f"{prefix}.{k}" if prefix else str(k), v)
        elif isinstance(value, (bool, int, float, str)):
            out[prefix] = value
        else:
            out[prefix] = str(value)

    walk("", config_to_dict(cfg))
    return out


def add_hparams(writer: Any, cfg: Any, summary: dict[str, Any]) -> None:
    """Write the run's hparams and final metrics (``hparam/<metric>``) into the writer's own directory."""
    import math

    from torch.utils.tensorboard.summary import hparams

    metrics = {f"hparam/{m}": float(summary[m]) for m in (*METRIC_NAMES, "return_mean")
               if summary.get(m) is not None and math.isfinite(float(summary[m]))}
    exp, ssi, sei = hparams(flat_hparams(cfg), metrics)
    fw = writer._get_file_writer()
    for s in (exp, ssi, sei):
        fw.add_summary(s, summary["env_steps"])
    for k, v in metrics.items():
        writer.add_scalar(k, v, summary["env_steps"])
