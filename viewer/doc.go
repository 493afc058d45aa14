// Package viewer renders volumes for reading, without any GUI dependency:
// axial, coronal and sagittal planes with physical aspect, orientation
// letters, crosshair and value readout, window/level by the DICOM VOI LUT
// functions, overlay compositing with our own perceptually even colour maps,
// colour bars, text stamping and a three-plane montage for reports.
//
// # Geometry
//
// A Scene wraps a *volume.Volume whose affine maps voxel indices to RAS
// millimetres. The volume is expected to have been reoriented to the closest
// canonical RAS orientation (volume.Reorient), which keeps slicing cache
// friendly; any other axis-aligned orientation (LPS, LAS, ...) is also shown
// correctly, because the planes are chosen from the affine rather than
// assumed. Planes follow the voxel grid: for an oblique acquisition the
// displayed "axial" plane is the voxel plane closest to axial, tilted from the
// true world plane by Scene.Obliquity degrees. Positions, readouts and the
// crosshair are exact in RAS millimetres through the affine either way.
//
// Output pixels are square in millimetres: a Frame resamples the two in-plane
// voxel axes to a common pixel size (by default the smallest voxel spacing of
// the volume, so all three planes share one scale). Sampling is nearest
// neighbour by default (thick slices stay visibly thick and no value is
// invented); bilinear in-plane interpolation is available as Linear.
//
// # Display convention
//
// The zero Convention is Radiological: axial and coronal planes are seen from
// the patient's feet / front, so the patient's right is on the image left.
// Neurological puts the patient's right on the image right. Sagittal planes
// are shown with anterior on the left in both. Every Frame reports the
// anatomical letter of each image edge (Frame.Letters), computed from the
// affine, and DrawLetters stamps them, so that the convention in use can
// always be read off the image.
//
// # Pixel coordinates
//
// Image pixel (u, v) covers the continuous square [u, u+1) × [v, v+1), with u
// to the right and v downwards; its centre is (u+0.5, v+0.5). The mapping
// functions (Frame.PixelToVoxel, Frame.PixelToWorld, Frame.WorldToPixel)
// take and return such continuous coordinates, as a click position does.
package viewer
