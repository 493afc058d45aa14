"""The transform nibabel's moved copies of anatomical.nii imply (python3-nibabel 5.0).

nibabel/tests/data/make_moved_anat.py made anat_moved.nii by giving
anatomical.nii the affine E·A with E = from_matvec(euler2mat(0.1, 0.2, 0.3),
[3, 4, 5]); reoriented_anat_moved.nii and resampled_anat_moved.nii are that
image resampled by SPM (test_processing.test_against_spm_resample). A point x
of anatomical.nii's world is therefore seen at E·x in the moved copies'
world. Prints E as a JSON 4x4 list.
"""
import json

from nibabel.affines import from_matvec
from nibabel.eulerangles import euler2mat

print(json.dumps(from_matvec(euler2mat(0.1, 0.2, 0.3), [3, 4, 5]).tolist()))
