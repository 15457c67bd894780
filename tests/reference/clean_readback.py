"""pydicom's reading of a cleaned copy, for tests/suite/clean.rs.

Library versions this was written against: pydicom 3.0.2, numpy 2.4.6.

    python clean_readback.py ORIGINAL_DIR CLEANED_DIR FILE...
        For each FILE (relative to both folders) prints one JSON line: what pydicom reads from
        the cleaned file (header attributes, the De-identification Method Code Sequence, the
        Source Image Sequence), and where its pixel_array differs from the original's (the box
        of the differing pixels, end exclusive, or null) and whether every pixel outside that
        box is equal. The code pydicom's own code dictionary gives for the Clean Pixel Data
        Option (pydicom.sr.codedict, generated from PS3.16) is printed too, as `dictionary`.
"""

import json
import sys
from pathlib import Path

import numpy as np
import pydicom
from pydicom.sr.codedict import codes


def text(ds, keyword):
    v = ds.get(keyword)
    if v is None:
        return None
    if isinstance(v, pydicom.multival.MultiValue):
        return [str(x) for x in v]
    return str(v)


def main():
    orig_dir, clean_dir = Path(sys.argv[1]), Path(sys.argv[2])
    code = codes.DCM.CleanPixelDataOption
    for rel in sys.argv[3:]:
        a = pydicom.dcmread(orig_dir / rel)
        b = pydicom.dcmread(clean_dir / rel)
        pa, pb = a.pixel_array, b.pixel_array
        diff = pa != pb
        if diff.ndim == 3 and pa.shape[-1] == 3 and b.SamplesPerPixel == 3:
            diff = diff.any(axis=-1)
        while diff.ndim > 2:
            diff = diff.any(axis=0)
        box = None
        if diff.any():
            ys, xs = np.nonzero(diff)
            box = [int(xs.min()), int(ys.min()), int(xs.max()) + 1, int(ys.max()) + 1]
        print(
            json.dumps(
                {
                    "file": rel,
                    "transfer_syntax": str(b.file_meta.TransferSyntaxUID),
                    "media_sop_instance": str(b.file_meta.MediaStorageSOPInstanceUID),
                    "sop_instance": str(b.SOPInstanceUID),
                    "original_sop_instance": str(a.SOPInstanceUID),
                    "original_sop_class": str(a.SOPClassUID),
                    "image_type": text(b, "ImageType"),
                    "source": [
                        [str(i.ReferencedSOPClassUID), str(i.ReferencedSOPInstanceUID)] for i in b.get("SourceImageSequence", [])
                    ],
                    "deid_codes": [
                        [str(i.CodeValue), str(i.CodingSchemeDesignator), str(i.CodeMeaning)]
                        for i in b.get("DeidentificationMethodCodeSequence", [])
                    ],
                    "dictionary": [code.value, code.scheme_designator, code.meaning],
                    "burned_in": text(b, "BurnedInAnnotation"),
                    "kept": {
                        k: [text(a, k), text(b, k)]
                        for k in [
                            "BitsAllocated",
                            "BitsStored",
                            "HighBit",
                            "PixelRepresentation",
                            "PhotometricInterpretation",
                            "Modality",
                            "WindowCenter",
                            "WindowWidth",
                            "RescaleSlope",
                            "RescaleIntercept",
                            "Rows",
                            "Columns",
                        ]
                    },
                    # Identifying values are compared here, never printed.
                    "identity_kept": all(a.get(k) == b.get(k) for k in ["PatientName", "PatientID", "StudyInstanceUID", "SeriesInstanceUID"]),
                    "shape": [list(pa.shape), list(pb.shape)],
                    "dtype": [str(pa.dtype), str(pb.dtype)],
                    "diff_box": box,
                    "changed_pixels": int(diff.sum()),
                }
            )
        )


if __name__ == "__main__":
    main()
