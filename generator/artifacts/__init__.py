"""Layer 6, artifacts: the files of a design (RTL, ROM images, vectors, testbenches, manifest) and how they are written."""

from __future__ import annotations

from .design_dir import (MANIFEST, REPORT_DIR, STALE_PREFIX, DesignDirectory, build_files, generated_files,
                         load_design, write_design)
from .kit import c_prefix, kit_entry, kit_files
from .manifest import build_manifest, rom_files, rom_manifest
from .rtl import languages, rtl_files, rtl_manifest
from .testbench import harness_module, test_module, testbench_files
from .texts import GENERATOR, banner, content_hash, design_toml, toml_value
from .vectors import output_header, special_codes, vector_files
from .words import (BLOCKS, demapper_input_words, demapper_words, format_words, lane_symbols, lane_words,
                    mapper_input_words, mapper_words, pack_words, packing, parse_words, random_words, read_words,
                    run_block, unpack_words)
from .writer import probe_directory, probe_file, replace_directory, write_file

__all__ = ["BLOCKS", "GENERATOR", "MANIFEST", "REPORT_DIR", "STALE_PREFIX", "DesignDirectory", "banner",
           "build_files", "build_manifest", "c_prefix", "content_hash", "demapper_input_words", "demapper_words",
           "design_toml", "format_words", "generated_files", "harness_module", "kit_entry", "kit_files", "lane_symbols",
           "lane_words", "languages", "load_design", "mapper_input_words", "mapper_words",
           "output_header", "pack_words", "packing", "parse_words", "probe_directory", "probe_file", "random_words", "read_words",
           "replace_directory", "rom_files", "rom_manifest", "rtl_files", "rtl_manifest", "run_block",
           "special_codes", "test_module", "testbench_files", "toml_value", "unpack_words", "vector_files",
           "write_design", "write_file"]
