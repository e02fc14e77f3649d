"""armlock's assigner: the experiment spec and the frozen salted-hash split (xxhash + pydantic only)."""

from .batch import arm_for, assign_many, buckets_and_arms
from .contract import bucket, hash64, key_bytes
from .errors import ArmlockError, InputError, SpecError, SplitChangedError
from .lock import check_lock, lock_path
from .spec import Arm, Spec, fingerprint, load_spec, spec_from_dict

__all__ = [
    "Arm",
    "ArmlockError",
    "InputError",
    "Spec",
    "SpecError",
    "SplitChangedError",
    "arm_for",
    "assign_many",
    "bucket",
    "buckets_and_arms",
    "check_lock",
    "fingerprint",
    "hash64",
    "key_bytes",
    "load_spec",
    "lock_path",
    "spec_from_dict",
]

__version__ = "0.1.0"
