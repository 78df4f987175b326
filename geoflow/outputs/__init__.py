"""What geoflow writes: table contracts and rows (``tables``) and atomic file writers (``files``).

Every writer is atomic (a temporary name beside the final one, moved over it when complete).
"""
from .files import (
                    BlockWriter,
                    atomic_path,
                    block_raster_writer,
                    cog_options,
                    plain,
                    read_raster,
                    tiled_gtiff_options,
                    write_calibration_csv,
                    write_extent_gpkg,
                    write_manifest,
                    write_profile_csv,
                    write_raster,
                    write_rating_csv,
                    write_sections_gpkg,
                    write_structures_csv,
)
from .tables import (
                    CALIBRATION_COLUMNS,
                    EXTENT_COLUMNS,
                    INFO_ONLY_FLAGS,
                    LAYER_MEANING,
                    PROFILE_COLUMNS,
                    PROFILE_MEANING,
                    RASTER_MEANING,
                    RATING_COLUMNS,
                    SECTION_COLUMNS,
                    STRUCTURE_COLUMNS,
                    empty_profile,
                    empty_structures,
                    profile_rows,
                    raster_metadata,
                    section_rows,
                    structure_rows,
)

__all__ = ["BlockWriter", "CALIBRATION_COLUMNS", "RATING_COLUMNS", "EXTENT_COLUMNS", "INFO_ONLY_FLAGS", "LAYER_MEANING",
           "PROFILE_COLUMNS", "PROFILE_MEANING", "RASTER_MEANING", "SECTION_COLUMNS", "atomic_path",
           "block_raster_writer", "cog_options", "empty_profile", "plain", "profile_rows", "raster_metadata",
           "read_raster", "section_rows", "tiled_gtiff_options", "write_calibration_csv", "write_rating_csv",
           "write_extent_gpkg", "write_manifest", "write_profile_csv", "write_raster",
           "write_sections_gpkg", "STRUCTURE_COLUMNS", "empty_structures", "structure_rows", "write_structures_csv"]
