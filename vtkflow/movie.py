"""Movies from the PNG frames of a render: MP4 (H.264, through the ffmpeg binary that the imageio-ffmpeg
wheel ships) and animated GIF. Written atomically like every output; imported only when asked for."""

from __future__ import annotations

from pathlib import Path
from typing import Optional, Sequence

from .errors import OutputError
from .output import atomic_path

__all__ = ["MOVIE_FORMATS", "encoder_problem", "write_movie"]

#: Movie formats by recipe name (``renders.<name>.movie.formats``).
MOVIE_FORMATS = ("mp4", "gif")


def encoder_problem(formats: Sequence[str]) -> Optional[str]:
    """Why these formats cannot be written here (one line), or None."""
    try:
        import imageio.v3  # noqa: F401  (is it installed?)
    except ImportError:
        return "the Python package imageio is missing (pip install imageio)"
    if "mp4" in formats:
        try:
            import imageio_ffmpeg

            exe = imageio_ffmpeg.get_ffmpeg_exe()
        except Exception as exc:  # missing package or binary: the package raises RuntimeError
            return f"no ffmpeg encoder for MP4 ({exc}); install the Python package imageio-ffmpeg"
        if not Path(exe).is_file():
            return f"no ffmpeg encoder for MP4 at {exe}; reinstall the Python package imageio-ffmpeg"
    return None


def write_movie(frames: Sequence[Path], path: Path, fps: float) -> Path:
    """Write the PNG ``frames`` as a movie at ``path`` (format from its suffix: .mp4 or .gif)."""
    import imageio.v2 as iio2
    import imageio.v3 as iio

    path = Path(path)
    kind = path.suffix.lower().lstrip(".")
    if kind not in MOVIE_FORMATS:
        raise ValueError(f"{path}: movie format {kind!r} is not one of {', '.join(MOVIE_FORMATS)}")
    with atomic_path(path, keep_suffix=True) as tmp:
        try:
            if kind == "mp4":
                # H.264 in yuv420p (what players expect) needs even sizes: the recipe checks them, and
                # macro_block_size=2 keeps imageio from resizing
                writer = iio2.get_writer(str(tmp), format="FFMPEG", mode="I", fps=float(fps), codec="libx264",
                                         pixelformat="yuv420p", macro_block_size=2,
                                         ffmpeg_log_level="error")
                with writer:
                    for f in frames:
                        writer.append_data(iio.imread(f))
            else:
                iio.imwrite(tmp, [iio.imread(f) for f in frames], extension=".gif", duration=1000.0 / float(fps), loop=0)
        except (OSError, RuntimeError, ValueError) as exc:
            raise OutputError(f"{path}: could not write the movie ({str(exc).splitlines()[0] if str(exc) else exc})") from None
    return path
