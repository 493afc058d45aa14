package overlay

import (
	"fmt"
	"strings"
)

// Method names a relevance method by its command-line key.
type Method string

// The methods. The keys are those of `brightfold score --map`.
const (
	LRP                 Method = "lrp"
	IntegratedGradients Method = "ig"
	GradientInput       Method = "gradinput"
	Occlusion           Method = "occlusion"
)

// Methods lists every method in the order they are offered.
func Methods() []Method { return []Method{LRP, IntegratedGradients, GradientInput, Occlusion} }

// ParseMethod returns the method with key s.
func ParseMethod(s string) (Method, error) {
	for _, m := range Methods() {
		if string(m) == s {
			return m, nil
		}
	}
	keys := make([]string, 0, 4)
	for _, m := range Methods() {
		keys = append(keys, string(m))
	}
	return "", fmt.Errorf("unknown relevance method %q (want one of %s)", s, strings.Join(keys, ", "))
}

// Title is the method's name on screen and in figures.
func (m Method) Title() string {
	switch m {
	case LRP:
		return "LRP"
	case IntegratedGradients:
		return "Integrated gradients"
	case GradientInput:
		return "Gradient × input"
	case Occlusion:
		return "Occlusion"
	}
	return string(m)
}

// Reference cites the method's paper.
func (m Method) Reference() string {
	switch m {
	case LRP:
		return "Bach et al. 2015; composite rules of Montavon et al. 2019"
	case IntegratedGradients:
		return "Sundararajan et al. 2017"
	case GradientInput:
		return "Shrikumar et al. 2016"
	case Occlusion:
		return "Zeiler & Fergus 2014"
	}
	return ""
}

// About is one plain sentence saying what the map shows.
func (m Method) About() string {
	switch m {
	case LRP:
		return "The class score redistributed backwards, layer by layer, onto the voxels; positive values speak for the class."
	case IntegratedGradients:
		return "Gradients averaged along a straight path from a baseline scan to this one, times the difference; the values add up to the score change."
	case GradientInput:
		return "The score's gradient times the voxel value: a first-order estimate of each voxel's share of the score."
	case Occlusion:
		return "How much the class score drops when a cube of the scan around the voxel is hidden."
	}
	return ""
}

// Availability says whether a method can run on a model folder and, if not, why.
type Availability struct {
	Method    Method
	Available bool
	Reason    string // empty when available
}
