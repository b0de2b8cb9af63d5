"""Linux Landlock for the process that runs a `foldwise sql --allow-files` query: after
`restrict_to_reading(folder)` the process may read and execute files anywhere, write,
create, remove, truncate, link or rename only inside `folder`, and open no TCP connection
and bind no TCP port; the kernel enforces it until the process ends, for the process and
everything it starts, whatever DuckDB is asked to do.

Plain ctypes system calls (landlock_create_ruleset 444, landlock_add_rule 445,
landlock_restrict_self 446; the same numbers on every Linux architecture since 5.13), so
it needs nothing installed. `abi_version()` says what the running kernel offers."""

from __future__ import annotations

import ctypes
import os
import sys

__all__ = ["abi_version", "restrict_to_reading", "MIN_ABI", "LandlockUnavailable"]

MIN_ABI = 4
"""TCP rules arrived in ABI 4 (Linux 6.7); below it a query could still reach the network."""

_CREATE_RULESET, _ADD_RULE, _RESTRICT_SELF = 444, 445, 446
_CREATE_RULESET_VERSION = 1 << 0
_RULE_PATH_BENEATH = 1
_PR_SET_NO_NEW_PRIVS = 38

# filesystem rights, by the ABI that introduced them
_EXECUTE, _WRITE_FILE, _READ_FILE, _READ_DIR = 1 << 0, 1 << 1, 1 << 2, 1 << 3
_ABI1_RIGHTS = (1 << 13) - 1  # execute .. make_sym: bits 0-12
_REFER, _TRUNCATE, _IOCTL_DEV = 1 << 13, 1 << 14, 1 << 15
_READING = _EXECUTE | _READ_FILE | _READ_DIR
# network rights (ABI 4) and scopes (ABI 6)
_BIND_TCP, _CONNECT_TCP = 1 << 0, 1 << 1
_SCOPE_ABSTRACT_UNIX_SOCKET, _SCOPE_SIGNAL = 1 << 0, 1 << 1


class LandlockUnavailable(OSError):
    """The kernel cannot confine this process as asked; nothing was restricted."""


class _RulesetAttr(ctypes.Structure):
    _fields_ = [("handled_access_fs", ctypes.c_uint64), ("handled_access_net", ctypes.c_uint64),
                ("scoped", ctypes.c_uint64)]


class _PathBeneathAttr(ctypes.Structure):
    _pack_ = 1
    _fields_ = [("allowed_access", ctypes.c_uint64), ("parent_fd", ctypes.c_int32)]


def _libc():
    libc = ctypes.CDLL(None, use_errno=True)
    libc.syscall.restype = ctypes.c_long
    return libc


def abi_version() -> int:
    """The Landlock ABI the running kernel offers; 0 where there is none (not Linux, an old
    kernel, or Landlock not enabled at boot)."""
    if not sys.platform.startswith("linux"):
        return 0
    try:
        found = _libc().syscall(_CREATE_RULESET, None, ctypes.c_size_t(0),
                                ctypes.c_uint32(_CREATE_RULESET_VERSION))
    except (OSError, AttributeError):
        return 0
    return max(int(found), 0)


def _fs_rights(abi: int) -> int:
    rights = _ABI1_RIGHTS
    if abi >= 2:
        rights |= _REFER
    if abi >= 3:
        rights |= _TRUNCATE
    if abi >= 5:
        rights |= _IOCTL_DEV
    return rights


def _check(result: int, what: str) -> int:
    if result < 0:
        err = ctypes.get_errno()
        raise LandlockUnavailable(err, f"Landlock {what} failed: {os.strerror(err)}")
    return result


def restrict_to_reading(writable: str | os.PathLike) -> int:
    """Confine this process for good: read and execute everywhere, every write-like right
    only beneath `writable`, no TCP connect or bind, no signals or abstract sockets to
    processes outside it. Returns the ABI used; raises LandlockUnavailable (having
    restricted nothing) if the kernel offers less than MIN_ABI."""
    abi = abi_version()
    if abi < MIN_ABI:
        raise LandlockUnavailable(0, f"Landlock ABI {abi} is below the {MIN_ABI} needed")
    libc = _libc()
    handled = _fs_rights(abi)
    attr = _RulesetAttr(handled, _BIND_TCP | _CONNECT_TCP,
                        _SCOPE_ABSTRACT_UNIX_SOCKET | _SCOPE_SIGNAL if abi >= 6 else 0)
    size = ctypes.sizeof(attr) if abi >= 6 else 16
    ruleset = _check(libc.syscall(_CREATE_RULESET, ctypes.byref(attr), ctypes.c_size_t(size),
                                  ctypes.c_uint32(0)), "create_ruleset")
    try:
        for path, rights in (("/", _READING), (os.fspath(writable), handled)):
            fd = os.open(path, os.O_PATH | os.O_DIRECTORY | os.O_CLOEXEC)
            try:
                rule = _PathBeneathAttr(rights, fd)
                _check(libc.syscall(_ADD_RULE, ctypes.c_int(ruleset),
                                    ctypes.c_int(_RULE_PATH_BENEATH), ctypes.byref(rule),
                                    ctypes.c_uint32(0)), "add_rule")
            finally:
                os.close(fd)
        _check(libc.prctl(_PR_SET_NO_NEW_PRIVS, 1, 0, 0, 0), "no_new_privs")
        _check(libc.syscall(_RESTRICT_SELF, ctypes.c_int(ruleset), ctypes.c_uint32(0)),
               "restrict_self")
    finally:
        os.close(ruleset)
    return abi
