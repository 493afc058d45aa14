package train

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"time"

	"brightfold/inference/fitcheck"
	"brightfold/internal/onnx"
	"brightfold/internal/stats"
)

// Example is one preprocessed case: the model input in grid order (x
// fastest, the [1, 1, z, y, x] tensor) and its class index.
type Example struct {
	X     []float32
	Label int
}

// Config sets the training run.
type Config struct {
	Seed        uint64  // drives shuffling and augmentation
	Epochs      int     // passes over the training cases
	BatchSize   int     // cases per step
	LR          float64 // peak learning rate (cosine decay to zero, linear warm-up)
	WarmupSteps int
	WeightDecay float64 // decoupled, on convolution and classifier weights
	Momentum    float64 // batch normalisation running-statistics momentum
	Flip        bool    // mirror left-right at random (the grid's x axis)
	Shift       int     // translate by up to this many voxels along each axis at random (edges replicated)
	Workers     int     // goroutines, one case each
	// Log, when set, receives one line per epoch.
	Log func(format string, args ...any) `json:"-"`
}

// DefaultConfig is the demo model's training recipe.
func DefaultConfig(seed uint64) Config {
	return Config{Seed: seed, Epochs: 12, BatchSize: 8, LR: 3e-3, WarmupSteps: 20, WeightDecay: 1e-4,
		Momentum: 0.1, Flip: true, Shift: 1, Workers: 2}
}

// Epoch summarises one epoch.
type Epoch struct {
	Epoch     int     `json:"epoch"`
	TrainLoss float64 `json:"train_loss"` // mean cross-entropy of the steps (batch statistics)
	ValLoss   float64 `json:"val_loss"`   // mean cross-entropy of the exported model on validation
	ValAUROC  float64 `json:"val_auroc"`
	Seconds   float64 `json:"seconds"`
}

// CrossEntropy returns the mean softmax cross-entropy of the logit rows and
// its gradient with respect to each row: (softmax(z) − onehot(y)) / n.
func CrossEntropy(logits [][]float64, labels []int) (float64, [][]float64) {
	n := float64(len(logits))
	var loss float64
	grads := make([][]float64, len(logits))
	for i, z := range logits {
		p := fitcheck.Softmax(z, 1)
		loss += stats.LogSumExp(z) - z[labels[i]]
		g := make([]float64, len(z))
		for k := range z {
			g[k] = p[k] / n
		}
		g[labels[i]] -= 1 / n
		grads[i] = g
	}
	return loss / n, grads
}

// Step runs one training step on a batch: forward with batch statistics,
// cross-entropy, backward, and an Adam update at learning rate lr. It
// returns the batch loss.
func (n *Net) Step(opt *Adam, batch []Example, lr float64, cfg Config) (float64, error) {
	xs, labels := split(batch)
	for _, x := range xs {
		if len(x) != n.Arch.Voxels() {
			return 0, fmt.Errorf("train: case has %d values, the grid has %d", len(x), n.Arch.Voxels())
		}
	}
	st, err := n.trainForward(xs, cfg.Workers, cfg.Momentum)
	if err != nil {
		return 0, fmt.Errorf("train: forward: %w", err)
	}
	loss, gl := CrossEntropy(st.logits, labels)
	grads, err := n.trainBackward(st, gl, cfg.Workers)
	if err != nil {
		return 0, fmt.Errorf("train: backward: %w", err)
	}
	params := map[string]*onnx.Tensor{}
	for _, name := range n.ParamNames() {
		params[name] = n.param[name]
	}
	opt.Step(params, grads, lr)
	return loss, nil
}

// isWeight selects the tensors weight decay applies to: convolution and
// classifier weights, not batch-normalisation parameters or biases.
func isWeight(name string) bool {
	return strings.HasSuffix(name, ".weight") && !strings.HasPrefix(name, "bn")
}

// Fit trains n on the training cases and reports each epoch on the
// validation cases.
func Fit(n *Net, trainSet, valSet []Example, cfg Config) ([]Epoch, error) {
	if len(trainSet) == 0 || cfg.Epochs < 1 || cfg.BatchSize < 1 {
		return nil, errors.New("train: need training cases, at least one epoch and a positive batch size")
	}
	opt := NewAdam(cfg.WeightDecay, isWeight)
	steps := len(trainSet) / cfg.BatchSize
	if steps == 0 {
		steps = 1
	}
	total := steps * cfg.Epochs
	var hist []Epoch
	step := 0
	for ep := 0; ep < cfg.Epochs; ep++ {
		t0 := time.Now()
		r := rand.New(rand.NewPCG(cfg.Seed, uint64(ep)+1))
		order := r.Perm(len(trainSet))
		var lossSum float64
		for s := 0; s < steps; s++ {
			idx := order[s*cfg.BatchSize : min((s+1)*cfg.BatchSize, len(order))]
			batch := make([]Example, len(idx))
			for i, j := range idx {
				batch[i] = Example{X: augment(trainSet[j].X, n.Arch.Grid, r, cfg), Label: trainSet[j].Label}
			}
			loss, err := n.Step(opt, batch, Schedule(cfg, step, total), cfg)
			if err != nil {
				return hist, err
			}
			if math.IsNaN(loss) {
				return hist, fmt.Errorf("train: loss became NaN at epoch %d step %d", ep+1, s+1)
			}
			lossSum += loss
			step++
		}
		e := Epoch{Epoch: ep + 1, TrainLoss: lossSum / float64(steps)}
		if len(valSet) > 0 {
			ev, err := n.Evaluate(valSet, cfg.Workers)
			if err != nil {
				return hist, err
			}
			e.ValLoss, e.ValAUROC = ev.Loss, ev.AUROC
		}
		e.Seconds = time.Since(t0).Seconds()
		hist = append(hist, e)
		if cfg.Log != nil {
			cfg.Log("epoch %2d  train loss %.4f  val loss %.4f  val AUROC %.4f  %.0f s", e.Epoch, e.TrainLoss, e.ValLoss, e.ValAUROC, e.Seconds)
		}
	}
	return hist, nil
}

// Schedule is the learning rate at step (0-based) of total: a linear
// warm-up over cfg.WarmupSteps, then cosine decay to zero (Loshchilov &
// Hutter 2017, SGDR, without restarts).
func Schedule(cfg Config, step, total int) float64 {
	if step < cfg.WarmupSteps {
		return cfg.LR * float64(step+1) / float64(cfg.WarmupSteps)
	}
	span := max(1, total-cfg.WarmupSteps)
	return cfg.LR * 0.5 * (1 + math.Cos(math.Pi*float64(step-cfg.WarmupSteps)/float64(span)))
}

// augment returns x mirrored along the grid's x axis (left-right) with
// probability ½ when cfg.Flip, and translated by a random whole number of
// voxels in [−cfg.Shift, cfg.Shift] per axis with the edge voxels
// replicated; x itself when neither applies. The draws come from r in a
// fixed order, so a seed fixes them.
func augment(x []float32, grid [3]int, r *rand.Rand, cfg Config) []float32 {
	flip := cfg.Flip && r.IntN(2) == 1
	var d [3]int
	if cfg.Shift > 0 {
		for a := range d {
			d[a] = r.IntN(2*cfg.Shift+1) - cfg.Shift
		}
	}
	if !flip && d == [3]int{} {
		return x
	}
	nx, ny, nz := grid[0], grid[1], grid[2]
	clamp := func(v, n int) int { return max(0, min(n-1, v)) }
	out := make([]float32, len(x))
	for z := 0; z < nz; z++ {
		sz := clamp(z-d[2], nz)
		for y := 0; y < ny; y++ {
			row := x[nx*(clamp(y-d[1], ny)+ny*sz):]
			dst := out[nx*(y+ny*z):]
			for i := 0; i < nx; i++ {
				src := clamp(i-d[0], nx)
				if flip {
					src = nx - 1 - src
				}
				dst[i] = row[src]
			}
		}
	}
	return out
}

// Evaluation is the exported model's performance on labelled cases.
type Evaluation struct {
	Loss    float64
	AUROC   float64 // positive class (index 1) probability vs label
	Outputs []Output
}

// Evaluate runs the exported model on cases and scores it.
func (n *Net) Evaluate(set []Example, workers int) (*Evaluation, error) {
	xs, labels := split(set)
	pos := make([]bool, len(set))
	for i, l := range labels {
		pos[i] = l == 1
	}
	out, err := n.Predict(xs, workers)
	if err != nil {
		return nil, fmt.Errorf("evaluate: %w", err)
	}
	logits := make([][]float64, len(out))
	score := make([]float64, len(out))
	for i, o := range out {
		logits[i] = o.Logits
		score[i] = o.Logits[1] - o.Logits[0]
	}
	loss, _ := CrossEntropy(logits, labels)
	return &Evaluation{Loss: loss, AUROC: stats.AUROC(score, pos), Outputs: out}, nil
}

// split separates the inputs and labels of examples.
func split(set []Example) ([][]float32, []int) {
	xs := make([][]float32, len(set))
	labels := make([]int, len(set))
	for i, ex := range set {
		xs[i], labels[i] = ex.X, ex.Label
	}
	return xs, labels
}
