package train

import "testing"

// PredictNet, built from a model's bytes alone, predicts exactly as the Net
// that was trained (the refit of a card uses it instead of retraining).
func TestPredictNetMatchesTrainedNet(t *testing.T) {
	a := tinyArch()
	n, err := NewNet(a, 8)
	if err != nil {
		t.Fatal(err)
	}
	set := blobSet(a, 6, 9)
	cfg := DefaultConfig(1)
	cfg.Epochs, cfg.BatchSize = 1, 3
	if _, err := Fit(n, set, nil, cfg); err != nil {
		t.Fatal(err)
	}
	b, err := n.Encode()
	if err != nil {
		t.Fatal(err)
	}
	p, err := PredictNet(a, b)
	if err != nil {
		t.Fatal(err)
	}
	xs := [][]float32{set[0].X, set[3].X}
	want, _ := n.Predict(xs, 2)
	got, err := p.Predict(xs, 2)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		for k, v := range want[i].Logits {
			if got[i].Logits[k] != v {
				t.Errorf("case %d logit %d: %v, trained net %v", i, k, got[i].Logits[k], v)
			}
		}
		for k, v := range want[i].Features {
			if got[i].Features[k] != v {
				t.Errorf("case %d feature %d: %v, trained net %v", i, k, got[i].Features[k], v)
			}
		}
	}
}
