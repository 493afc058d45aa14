package onnx

import (
	"errors"
	"testing"
)

// FuzzCheckNoExternalData walks arbitrary bytes as a ModelProto: never a
// panic, and Decode never accepts what the walk calls external.
func FuzzCheckNoExternalData(f *testing.F) {
	f.Add([]byte{})
	f.Add(msg(nil, extModelGraph, msg(nil, extGraphInitializer, externalTensor(true))))
	f.Add(msg(nil, extModelGraph, msg(nil, extGraphNode, msg(nil, extNodeAttribute, msg(nil, extAttrG, msg(nil, extGraphInitializer, externalTensor(false)))))))
	f.Fuzz(func(t *testing.T, b []byte) {
		err := CheckNoExternalData(b)
		if _, derr := Decode(b); errors.Is(err, ErrExternalData) && derr == nil {
			t.Fatal("Decode accepted a model with external data")
		}
	})
}
