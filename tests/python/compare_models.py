#!/usr/bin/python3
"""compare_models.py - two sluice model files hold the same datasets with the
same contents and the same fingerprint, read independently with h5py
(Debian python3-h5py) and numpy. Used by tests/unit/test_handles.c (test_resave).

usage: compare_models.py A.h5 B.h5   (exit 0 same, 1 different)
"""
import sys

import h5py
import numpy as np


def datasets(f):
    out = {}
    f.visititems(lambda name, obj: out.__setitem__(name, obj) if isinstance(obj, h5py.Dataset) else None)
    return out


def main():
    a, b = sys.argv[1], sys.argv[2]
    bad = []
    with h5py.File(a, "r") as fa, h5py.File(b, "r") as fb:
        da, db = datasets(fa), datasets(fb)
        if set(da) != set(db):
            bad.append("datasets differ: only in A %s, only in B %s" % (sorted(set(da) - set(db)),
                                                                        sorted(set(db) - set(da))))
        for name in sorted(set(da) & set(db)):
            x, y = da[name][...], db[name][...]
            if x.shape != y.shape or not np.array_equal(x, y):
                bad.append("dataset %s differs" % name)
            if dict(da[name].attrs) != dict(db[name].attrs):
                bad.append("attributes of %s differ" % name)
        for key in ("fingerprint", "format_version", "n_states", "n_pairs", "reward_unit"):
            if fa.attrs.get(key) != fb.attrs.get(key):
                bad.append("attribute %s: %r vs %r" % (key, fa.attrs.get(key), fb.attrs.get(key)))
        nq = len([n for n in da if n.startswith("quantity/")])
        print("compared %d datasets (%d of quantities), fingerprint %s" % (len(da), nq, fa.attrs.get("fingerprint")))
        if nq == 0:
            bad.append("no quantity datasets: nothing of the issue was compared")
    for m in bad:
        print("FAIL: " + m)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
