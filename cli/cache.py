"""``lidmelt cache``: show the folder of tabulated melting paths, or clear it."""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lidmelt cache``."""
    parser.epilog = (
        "The forward model keeps its tabulated melting paths here so that later runs start "
        "at once. Set LIDMELT_CACHE to use another folder (an empty value switches the disk "
        "cache off) and LIDMELT_CACHE_MAX_MB to change the size cap (default 500); the least "
        "recently used tables go first. Only lidmelt's own table files are ever deleted.")
    parser.add_argument("--clear", action="store_true",
                        help="delete lidmelt's table files here (other files are left alone)")


def run(args: argparse.Namespace) -> int:
    """Print the cache folder and its tables, or clear them; 0 on success."""
    from ..forward import _cache  # standard library only: keeps the command quick

    folder = _cache.cache_folder()
    if folder is None:
        print(f"table cache: off ({_cache.CACHE_ENV} is set to an empty value); tables are "
              "rebuilt in every run")
        return 0
    if args.clear:
        removed = _cache.clear(folder)
        freed = sum(entry.size for entry in removed)
        print(f"table cache: {folder}")
        print(f"removed {_count(len(removed), 'file')} ({_megabytes(freed)})")
        _report_others(_cache.list_folder(folder))
        return 0
    _show(folder, _cache)
    return 0


def _show(folder, cache) -> None:
    listing = cache.list_folder(folder)
    source = (f"from {cache.CACHE_ENV}" if cache.CACHE_ENV in os.environ
              else f"platform default; set {cache.CACHE_ENV} to move it")
    print(f"table cache: {folder} ({source})")
    print(f"size: {_megabytes(listing.size)} in {_count(len(listing.tables), 'table')}; "
          f"limit {_megabytes(_limit(cache))} ({cache.LIMIT_ENV})")
    rows = [(entry, "") for entry in listing.tables]
    rows += [(entry, "  (left by an unfinished write or build; removed once an hour old)")
             for entry in listing.partial]
    if rows:
        print(f"\n{'size':>10}  {'last used':16}  file (least recently used first)")
    for entry, note in rows:
        used = time.strftime("%Y-%m-%d %H:%M", time.localtime(entry.last_used))
        print(f"{_megabytes(entry.size):>10}  {used:16}  {entry.path.name}{note}")
    _report_others(listing)


def _limit(cache) -> int:
    """The size cap; a bad setting is said in one line on stderr (the default applies)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        limit = cache.cache_limit()
    for warning in caught:
        print(f"lidmelt cache: warning: {warning.message}", file=sys.stderr)
    return limit


def _report_others(listing) -> None:
    if listing.others:
        print(f"\n{_count(len(listing.others), 'other entry')} here "
              f"{'is' if len(listing.others) == 1 else 'are'} not lidmelt's: left alone")


def _megabytes(size: int) -> str:
    return f"{size / 1e6:.1f} MB"


def _count(n: int, noun: str) -> str:
    if n == 1:
        return f"1 {noun}"
    return f"{n} {noun[:-1]}ies" if noun.endswith("y") else f"{n} {noun}s"
