"""Reference values for spurion's DICOM reader and VOI LUT (tests/dicom_reference.rs).

Library versions this was made with: pydicom 3.0.2, numpy 2.4.6, and, as pydicom's decoders for
JPEG and JPEG 2000, pylibjpeg 2.1.0 + pylibjpeg-libjpeg 2.5.0 + pylibjpeg-openjpeg 2.6.0.

    python pydicom_lut.py make FIXTURES_DIR
        Reads pydicom's bundled test files (pydicom.data), writes a few derived files of its own
        (meta-less files, a VOI LUT Sequence, a Modality LUT Sequence, MONOCHROME1, SIGMOID,
        LINEAR_EXACT, YBR_FULL in RLE) into FIXTURES_DIR/derived/, and for every file writes
            FIXTURES_DIR/ref/NAME.modality.npy   apply_modality_lut(pixel_array, ds), sampled
            FIXTURES_DIR/ref/NAME.voiK.npy       apply_voi_lut(modality, ds, index=K), sampled
        and one FIXTURES_DIR/reference.json with the facts of each file.
    python pydicom_lut.py readback FILE
        Prints JSON of what pydicom reads from FILE (pixels, header), for the writer's round trip.
    python pydicom_lut.py testdir
        Prints the folder of pydicom's bundled test files.
    python pydicom_lut.py speed FILE N
        Best of N runs of dcmread + pixel_array + apply_modality_lut + apply_voi_lut, in ms
        (the counterpart of examples/speed.rs).

Arrays are sampled on a grid (every `stride`-th row and column, at most 32 per axis) to keep the
fixtures small; the JSON also holds the min, max and sum over every pixel of the frame.
"""

import json
import math
import sys
import uuid
from pathlib import Path

import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.pixels import apply_modality_lut, apply_voi_lut, convert_color_space
from pydicom.sequence import Sequence
from pydicom.uid import RLELossless

TEST_DIR = Path(pydicom.data.get_testdata_file("CT_small.dcm")).parent
MAX_SAMPLES = 32

# (file, frame): pydicom's bundled files. Comments name what each covers.
BUNDLED = [
    ("MR_small_implicit.dcm", 0),  # implicit VR little endian, signed 16-bit, one window
    ("MR_small.dcm", 0),  # explicit VR little endian
    ("MR_small_bigendian.dcm", 0),  # explicit VR big endian
    ("MR_small_RLE.dcm", 0),  # RLE Lossless, 16-bit
    ("MR_small_jp2klossless.dcm", 0),  # JPEG 2000 lossless
    ("CT_small.dcm", 0),  # signed, Rescale Slope/Intercept, no window
    ("image_dfl.dcm", 0),  # deflated explicit VR little endian, 8-bit
    ("rtdose.dcm", 3),  # implicit VR, 15 frames, 32-bit unsigned
    ("rtdose_expb.dcm", 7),  # explicit VR big endian, 15 frames, 32-bit
    ("693_J2KI.dcm", 0),  # JPEG 2000 (lossy), CT 14 of 16 bits signed, rescale, window
    ("J2K_pixelrep_mismatch.dcm", 0),  # JPEG 2000 coded unsigned for a signed header; 3 windows
    ("JPEG2000.dcm", 0),  # JPEG 2000 (lossy), NM
    ("examples_overlay.dcm", 0),  # 12 of 16 bits stored, two windows
    ("SC_rgb_small_odd.dcm", 0),  # RGB, 3x3, explicit little endian
    ("SC_rgb_small_odd_big_endian.dcm", 0),  # RGB, explicit big endian
    ("ExplVR_BigEnd.dcm", 0),  # RGB, explicit big endian, 60x80
    ("SC_ybr_full_422_uncompressed.dcm", 0),  # YBR_FULL_422 uncompressed (subsampled)
    ("SC_rgb_rle.dcm", 0),  # RLE, RGB 8-bit
    ("SC_rgb_rle_2frame.dcm", 1),  # RLE, 2 frames, second frame
    ("SC_rgb_rle_16bit.dcm", 0),  # RLE, RGB 16-bit
    ("SC_rgb_jpeg_dcmtk.dcm", 0),  # JPEG baseline, YBR_FULL
    ("SC_rgb_dcmtk_+eb+cy+np.dcm", 0),  # JPEG baseline, YBR_FULL_422
    ("SC_rgb_jpeg_gdcm.dcm", 0),  # JPEG lossless (process 14, SV1), RGB
    ("SC_rgb_gdcm_KY.dcm", 0),  # JPEG 2000, RGB
    ("examples_ybr_color.dcm", 5),  # JPEG baseline YBR_FULL_422, 30 frames, sixth frame
]

# Attributes recorded for the privacy test: every element of these files whose value is text.
PRIVACY_FILES = ["CT_small.dcm", "MR_small.dcm"]
TEXT_VRS = {"AE", "AS", "CS", "DA", "DS", "DT", "IS", "LO", "LT", "PN", "SH", "ST", "TM", "UI", "UT"}

# The demo UID root: a name-based (version 5) UUID as an integer, PS3.5 B.2 ("2.25." form).
DEMO_UID_NAME = "urn:spurion:demo:brackenridge-imaging-cooperative"


def demo_uid_root():
    return "2.25." + str(uuid.uuid5(uuid.NAMESPACE_URL, DEMO_UID_NAME).int)


def demo_identity(ds, number):
    """Gives a derived file the invented identity of the demo world."""
    ds.PatientName = f"DEMO^PHANTOM-{number:04d}"
    ds.PatientID = f"BIC-{number:04d}"
    ds.InstitutionName = "Brackenridge Imaging Cooperative (demo)"
    root = demo_uid_root()
    ds.StudyInstanceUID = f"{root}.9.{number}.1"
    ds.SeriesInstanceUID = f"{root}.9.{number}.2"
    ds.SOPInstanceUID = f"{root}.9.{number}.3"
    if getattr(ds, "file_meta", None) is not None and "MediaStorageSOPInstanceUID" in ds.file_meta:
        ds.file_meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID


def without_meta(name, out, implicit_vr, little_endian, number):
    """A copy with neither preamble nor file meta group (PS3.10 7.1 makes both mandatory)."""
    ds = pydicom.dcmread(TEST_DIR / name)
    demo_identity(ds, number)
    ds.file_meta = FileMetaDataset()
    ds.preamble = None
    ds.save_as(out, implicit_vr=implicit_vr, little_endian=little_endian, enforce_file_format=False)


def with_voi_lut_sequence(out):
    """MR_small with a VOI LUT Sequence (PS3.3 C.11.2) beside its window: a square-root curve."""
    ds = pydicom.dcmread(TEST_DIR / "MR_small.dcm")
    demo_identity(ds, 101)
    entries, first, bits = 2048, 200, 16
    item = Dataset()
    item.LUTDescriptor = [entries, first, bits]
    item.LUTExplanation = "SQRT DEMO"
    ramp = np.sqrt(np.arange(entries) / (entries - 1)) * (2**bits - 1)
    item.LUTData = [int(v) for v in np.round(ramp)]
    item["LUTData"].VR = "US"
    ds.VOILUTSequence = Sequence([item])
    ds.save_as(out)


def with_modality_lut_sequence(out):
    """CT_small with its rescale replaced by a Modality LUT Sequence (PS3.3 C.11.1), 16-bit out.

    16 bits, since pydicom's apply_modality_lut takes only 8 or 16 (its dtype is f"uint{bits}")."""
    ds = pydicom.dcmread(TEST_DIR / "CT_small.dcm")
    demo_identity(ds, 102)
    del ds.RescaleSlope
    del ds.RescaleIntercept
    arr = ds.pixel_array
    first = int(arr.min()) + 50  # some values fall below the first mapped value
    entries = 1024  # and some above the last entry: both ends are clamped
    item = Dataset()
    item.LUTDescriptor = [entries, first, 16]
    item["LUTDescriptor"].VR = "SS"
    item.ModalityLUTType = "HU"
    ramp = np.linspace(0, 65535, entries) ** 1.2 / 65535**0.2
    item.LUTData = [int(v) for v in np.round(ramp)]
    item["LUTData"].VR = "US"
    ds.ModalityLUTSequence = Sequence([item])
    ds.WindowCenter = 30000
    ds.WindowWidth = 40000
    ds.save_as(out)


def with_function(out, number, photometric, function, centers, widths, burned_in):
    """MR_small with another VOI LUT Function (PS3.3 C.11.2.1.3) and windows."""
    ds = pydicom.dcmread(TEST_DIR / "MR_small.dcm")
    demo_identity(ds, number)
    ds.PhotometricInterpretation = photometric
    ds.VOILUTFunction = function
    ds.WindowCenter = centers
    ds.WindowWidth = widths
    ds.WindowCenterWidthExplanation = [f"DEMO {i}" for i in range(len(centers))]
    ds.BurnedInAnnotation = burned_in
    ds.save_as(out)


def ybr_full_rle(out):
    """SC_rgb_rle.dcm turned into YBR_FULL (pydicom's convert_color_space) and RLE-coded again."""
    ds = pydicom.dcmread(TEST_DIR / "SC_rgb_rle.dcm")
    demo_identity(ds, 103)
    ybr = convert_color_space(ds.pixel_array, "RGB", "YBR_FULL")
    ds.PhotometricInterpretation = "YBR_FULL"
    ds.compress(RLELossless, ybr)
    ds.save_as(out)


def make_derived(folder):
    folder.mkdir(parents=True, exist_ok=True)
    without_meta("MR_small_implicit.dcm", folder / "nometa_implicit_le.dcm", True, True, 104)
    without_meta("MR_small.dcm", folder / "nometa_explicit_le.dcm", False, True, 105)
    without_meta("MR_small_bigendian.dcm", folder / "nometa_explicit_be.dcm", False, False, 106)
    with_voi_lut_sequence(folder / "voi_lut_sequence.dcm")
    with_modality_lut_sequence(folder / "modality_lut_sequence.dcm")
    with_function(folder / "mono1_sigmoid.dcm", 107, "MONOCHROME1", "SIGMOID", [600, 900], [1600, 300], "YES")
    with_function(folder / "linear_exact.dcm", 108, "MONOCHROME2", "LINEAR_EXACT", [600, 1000.5], [1600, 1], "NO")
    ybr_full_rle(folder / "ybr_full_rle.dcm")
    return [(p.name, 0) for p in sorted(folder.glob("*.dcm"))]


def as_list(value):
    if value is None:
        return []
    if isinstance(value, (list, pydicom.multival.MultiValue)):
        return list(value)
    return [value]


def window_ranges(ds, modality, count):
    """[y_min, y_max] of each window, read off pydicom itself: the window of ∓1e30."""
    extremes = np.array([-1e30, 1e30], dtype=np.float64)
    if ds.get("VOILUTSequence"):
        bits = ds.VOILUTSequence[0].LUTDescriptor[2]
        return [[0.0, float(2**bits - 1)]] * count
    with np.errstate(over="ignore"):  # SIGMOID: exp(4e30 / width) is inf, and 1 / inf is 0
        return [[float(v) for v in apply_voi_lut(extremes, ds, index=k)] for k in range(count)]


def sample(arr):
    stride = max(1, math.ceil(max(arr.shape[0], arr.shape[1]) / MAX_SAMPLES))
    return stride, np.ascontiguousarray(arr[::stride, ::stride]).astype(np.float32)


def stats(arr):
    a = arr.astype(np.float64)
    return {"min": float(a.min()), "max": float(a.max()), "sum": float(a.sum())}


def text_elements(ds):
    out = {}
    for elem in ds.iterall():
        if elem.VR in TEXT_VRS and elem.value not in (None, "") and elem.keyword:
            out[elem.keyword] = "\\".join(str(v) for v in as_list(elem.value))
    return out


def read(path):
    """dcmread; a meta-less file gets the transfer syntax pydicom itself detected while reading."""
    ds = pydicom.dcmread(path, force=True)
    detected = "TransferSyntaxUID" not in ds.get("file_meta", {})
    if detected:
        implicit, little = ds.original_encoding
        ds.file_meta = FileMetaDataset()
        ds.file_meta.TransferSyntaxUID = {
            (True, True): pydicom.uid.ImplicitVRLittleEndian,
            (False, True): pydicom.uid.ExplicitVRLittleEndian,
            (False, False): pydicom.uid.ExplicitVRBigEndian,
        }[(implicit, little)]
    return ds, detected


def reference(path, name, frame, ref_dir):
    ds, meta_detected = read(path)
    arr = ds.pixel_array
    frames = int(ds.get("NumberOfFrames", 1) or 1)
    if frames > 1:
        arr = arr[frame]
    modality = apply_modality_lut(arr, ds)
    stride, sampled = sample(modality)
    np.save(ref_dir / f"{name}.modality.npy", sampled)
    facts = {
        "file": name,
        "frame": frame,
        "rows": int(ds.Rows),
        "columns": int(ds.Columns),
        "frames": frames,
        "samples_per_pixel": int(ds.SamplesPerPixel),
        "bits_allocated": int(ds.BitsAllocated),
        "bits_stored": int(ds.BitsStored),
        "pixel_representation": int(ds.PixelRepresentation),
        "photometric": str(ds.PhotometricInterpretation),
        "transfer_syntax": str(ds.file_meta.TransferSyntaxUID),
        "transfer_syntax_detected": meta_detected,
        "modality": str(ds.get("Modality", "")),
        "burned_in_annotation": ds.get("BurnedInAnnotation"),
        "window_centers": [float(v) for v in as_list(ds.get("WindowCenter"))],
        "window_widths": [float(v) for v in as_list(ds.get("WindowWidth"))],
        "window_explanations": [str(v) for v in as_list(ds.get("WindowCenterWidthExplanation"))],
        "voi_function": str(ds.get("VOILUTFunction", "")),
        "voi_lut_items": len(ds.get("VOILUTSequence", [])),
        "stride": stride,
        "modality_stats": stats(modality),
        "voi": [],
    }
    mono = facts["photometric"] in ("MONOCHROME1", "MONOCHROME2")
    count = max(len(facts["window_centers"]), facts["voi_lut_items"])
    if mono and count:
        for k, (y_min, y_max) in enumerate(window_ranges(ds, modality, count)):
            voi = apply_voi_lut(modality, ds, index=k)
            np.save(ref_dir / f"{name}.voi{k}.npy", sample(voi)[1])
            facts["voi"].append({"index": k, "y_min": y_min, "y_max": y_max, "stats": stats(voi)})
    if name in PRIVACY_FILES:
        facts["text_elements"] = text_elements(ds)
    return facts


def make(fixtures):
    fixtures = Path(fixtures)
    ref_dir = fixtures / "ref"
    ref_dir.mkdir(parents=True, exist_ok=True)
    derived = make_derived(fixtures / "derived")
    files = [(TEST_DIR / n, n, f, False) for n, f in BUNDLED]
    files += [(fixtures / "derived" / n, n, f, True) for n, f in derived]
    out = {
        "made_with": {"pydicom": pydicom.__version__, "numpy": np.__version__},
        "demo_uid_root": demo_uid_root(),
        "demo_uid_name": DEMO_UID_NAME,
        "files": [],
    }
    for path, name, frame, is_derived in files:
        facts = reference(path, name, frame, ref_dir)
        facts["derived"] = is_derived
        out["files"].append(facts)
    (fixtures / "reference.json").write_text(json.dumps(out, indent=1) + "\n")


def readback(path):
    ds = pydicom.dcmread(path)
    arr = ds.pixel_array
    print(json.dumps({
        "transfer_syntax": str(ds.file_meta.TransferSyntaxUID),
        "sop_class": str(ds.SOPClassUID),
        "rows": int(ds.Rows),
        "columns": int(ds.Columns),
        "bits_allocated": int(ds.BitsAllocated),
        "bits_stored": int(ds.BitsStored),
        "patient_name": str(ds.PatientName),
        "patient_id": str(ds.PatientID),
        "modality": str(ds.Modality),
        "burned_in_annotation": str(ds.BurnedInAnnotation),
        "rescale": [float(ds.RescaleSlope), float(ds.RescaleIntercept)],
        "window": [float(ds.WindowCenter), float(ds.WindowWidth)],
        "uids": [str(ds.StudyInstanceUID), str(ds.SeriesInstanceUID), str(ds.SOPInstanceUID)],
        "pixels": arr.astype(int).ravel().tolist(),
        "modality_values": apply_modality_lut(arr, ds).astype(float).ravel().tolist(),
    }))


def speed(path, runs):
    import time

    best = float("inf")
    for _ in range(runs):
        start = time.perf_counter()
        ds = pydicom.dcmread(path)
        out = apply_voi_lut(apply_modality_lut(ds.pixel_array, ds), ds, index=0)
        best = min(best, time.perf_counter() - start)
    assert out.shape[0] == ds.Rows
    print(f"{path}\t{best * 1e3:.3f} ms")


if __name__ == "__main__":
    if len(sys.argv) == 3 and sys.argv[1] == "make":
        make(sys.argv[2])
    elif len(sys.argv) == 3 and sys.argv[1] == "readback":
        readback(sys.argv[2])
    elif len(sys.argv) == 4 and sys.argv[1] == "speed":
        speed(sys.argv[2], int(sys.argv[3]))
    elif len(sys.argv) == 2 and sys.argv[1] == "testdir":
        print(TEST_DIR)
    else:
        sys.exit(__doc__)
