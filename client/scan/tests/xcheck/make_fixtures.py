#!/usr/bin/env python3
"""Regenerate the cross-check fixtures for cairn-scan from independent libraries.

    pip install -r client/scan/tests/xcheck/requirements.txt   # and: apt-get install libdmtx0b
    python3 client/scan/tests/xcheck/make_fixtures.py

Writes tests/fixtures/reference.json (check digits, element strings, Code 128 modules) and
tests/fixtures/images/*.png (one barcode per format plus a degraded variant of each). The
Rust tests read these files; they never run Python.
"""
import decimal
import io
import json
import pathlib
import random
from importlib.metadata import version

import barcode
import numpy as np
import segno
from barcode.writer import ImageWriter
from PIL import Image, ImageFilter
from pylibdmtx.pylibdmtx import encode as dmtx_encode
from stdnum import ean, gs1_128
from stdnum.iso7064 import mod_37_2

HERE = pathlib.Path(__file__).resolve().parent
FIXTURES = HERE.parent / "fixtures"
GS = "\x1d"
rng = random.Random(20240601)


def digits(n):
    return "".join(rng.choice("0123456789") for _ in range(n))


def check_digits():
    # python-stdnum ean.calc_check_digit: GS1 modulo 10 for any key length.
    out = []
    for n in (7, 11, 12, 13, 17):
        for _ in range(40):
            body = digits(n)
            out.append({"body": body, "check": ean.calc_check_digit(body)})
    return out


def mod37_2_cases():
    alphabet = "0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZ"
    out = []
    for _ in range(200):
        body = "".join(rng.choice(alphabet) for _ in range(rng.randint(1, 17)))
        out.append({"body": body, "check": mod_37_2.calc_check_digit(body)})
    return out


def element_strings():
    # python-stdnum gs1_128.encode builds the string (FNC1 as GS only where needed) and
    # gs1_128.info reads it back with types. Years stay in 2000-2068, where Python's %y
    # agrees with the GS1 century rule for a current year of 2024.
    out = []
    lots = ["ABC123", "L-9/2", "X", "LOT%20", "abc.def"]
    for i in range(60):
        data = {"01": "0" + digits(12)}
        data["01"] += ean.calc_check_digit(data["01"])
        if i % 2 == 0:
            data["17"] = f"{rng.randint(20, 40):02}{rng.randint(1, 12):02}{rng.choice([0, 1, 15, 28]):02}"
        if i % 3 == 0:
            data["10"] = rng.choice(lots)
        if i % 4 == 0:
            data["21"] = digits(rng.randint(1, 20))
        if i % 5 == 0:
            n = rng.randint(0, 5)
            data[f"310{n}"] = decimal.Decimal(rng.randint(1, 999999)).scaleb(-n)
        if i % 6 == 0:
            data["30"] = rng.randint(1, 99999999)
        if i % 7 == 0:
            data["15"] = f"{rng.randint(20, 40):02}0200"
        if i % 9 == 0:
            n = rng.randint(0, 3)
            data[f"392{n}"] = decimal.Decimal(rng.randint(1, 10**9)).scaleb(-n)
        raw = gs1_128.encode(data, separator=GS)
        info = gs1_128.info(raw, separator=GS)
        out.append({
            "raw": raw,
            "bracketed": gs1_128.encode(data, parentheses=True).replace(" ", ""),  # drop padding
            "order": list(info),
            "decoded": {ai: str(v) for ai, v in info.items()},
        })
    return out


def code128_modules():
    # python-barcode Code128.build() returns the symbol as a string of 1s and 0s.
    texts = ["CB1-WH1-A-03-12-2-K", "CB1-S9-ZB-A17-104-3-*", "Hello", "PJJ123C", "CB1-X-Y-Z-W-V-A"]
    return [{"text": t, "modules": barcode.get("code128", t).build()[0]} for t in texts]


def degrade(img, angle, blur, noise_sigma):
    """Rotate, blur and add Gaussian noise to a greyscale image."""
    img = img.convert("L")
    pad = Image.new("L", (img.width + 80, img.height + 80), 255)
    pad.paste(img, (40, 40))
    img = pad.rotate(angle, resample=Image.BICUBIC, expand=True, fillcolor=255)
    img = img.filter(ImageFilter.GaussianBlur(blur))
    arr = np.asarray(img, dtype=np.float32)
    arr += np.random.default_rng(7).normal(0, noise_sigma, arr.shape)
    return Image.fromarray(np.clip(arr, 0, 255).astype(np.uint8))


def one_d(kind, code, **opts):
    buf = io.BytesIO()
    barcode.get(kind, code, writer=ImageWriter()).write(
        buf, {"module_width": 0.33, "module_height": 10, "dpi": 200, "write_text": False, **opts}
    )
    return Image.open(io.BytesIO(buf.getvalue())).convert("L")


def images():
    cases = []
    dm_text = "CB1-WH1-A-03-12-2-K"
    dm = dmtx_encode(dm_text.encode())
    dm_img = Image.frombytes("RGB", (dm.width, dm.height), dm.pixels).convert("L")
    qr_text = "https://example.com/01/09520123456788/10/ABC123?17=261231"
    qr_buf = io.BytesIO()
    segno.make(qr_text, error="m").save(qr_buf, kind="png", scale=5, border=4)
    qr_img = Image.open(io.BytesIO(qr_buf.getvalue())).convert("L")
    bin_text = "CB1-WH1-A-03-12-2-K"
    gs1 = "0109520123456788" + "17261231" + "10ABC123"
    symbols = [
        ("ean13", "ean13", one_d("ean13", "501234567890"), "5012345678900"),
        ("upca", "upc_a", one_d("upca", "03600029145"), "036000291452"),
        ("code128", "code128", one_d("code128", bin_text), bin_text),
        # python-barcode's gs1_128 starts the symbol with FNC1.
        ("gs1_128", "code128", one_d("gs1_128", gs1), "]C1" + gs1),
        ("itf14", "itf", one_d("itf", "15012345678907"), "15012345678907"),
        ("datamatrix", "data_matrix", dm_img, dm_text),
        ("qr", "qr_code", qr_img, qr_text),
    ]
    angle_for = {"datamatrix": 25, "qr": 25}
    for name, fmt, img, text in symbols:
        img.save(FIXTURES / "images" / f"{name}.png", optimize=True)
        cases.append({"file": f"{name}.png", "format": fmt, "text": text})
        worse = degrade(img, angle_for.get(name, 4), 0.8, 18)
        worse.save(FIXTURES / "images" / f"{name}-degraded.png", optimize=True)
        cases.append({"file": f"{name}-degraded.png", "format": fmt, "text": text})
    return cases


def main():
    (FIXTURES / "images").mkdir(parents=True, exist_ok=True)
    header = {
        "generated_by": "client/scan/tests/xcheck/make_fixtures.py",
        "libraries": {
            name: version(name)
            for name in ["python-stdnum", "python-barcode", "segno", "pylibdmtx", "Pillow", "numpy"]
        },
    }
    reference = {
        **header,
        "gs1_check_digits (python-stdnum ean.calc_check_digit)": check_digits(),
        "mod37_2 (python-stdnum iso7064.mod_37_2.calc_check_digit)": mod37_2_cases(),
        "element_strings (python-stdnum gs1_128.encode / gs1_128.info)": element_strings(),
        "code128 (python-barcode Code128.build)": code128_modules(),
    }
    (FIXTURES / "reference.json").write_text(json.dumps(reference, indent=1) + "\n")
    manifest = {
        **header,
        "images (python-barcode ImageWriter, segno, pylibdmtx; degraded with Pillow/numpy)": images(),
    }
    (FIXTURES / "images" / "manifest.json").write_text(json.dumps(manifest, indent=1) + "\n")


if __name__ == "__main__":
    main()
