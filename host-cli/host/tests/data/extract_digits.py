"""Writes uci-digits-0-2.csv: the 8x8 images of digits 0, 1 and 2 from the UCI optical
recognition of handwritten digits data (Alpaydin and Kaynak 1998), as the copy of its test
set shipped inside scikit-learn (sklearn.datasets.load_digits, which reads the file bundled
with the package; no download). Run from this folder: python3 extract_digits.py

Columns p0 ... p63 are the pixels row by row (integers 0 to 16), then `digit`. Rows keep
scikit-learn's order.
"""
import csv

from sklearn.datasets import load_digits

digits = load_digits()
with open("uci-digits-0-2.csv", "w", newline="") as f:
    w = csv.writer(f, lineterminator="\n")
    w.writerow([f"p{i}" for i in range(64)] + ["digit"])
    for image, label in zip(digits.data, digits.target):
        if label <= 2:
            w.writerow([int(v) for v in image] + [int(label)])
