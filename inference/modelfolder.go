package inference

import (
	"archive/zip"
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path"
	"path/filepath"
	"strings"

	"brightfold/internal/atomicfile"
	"brightfold/internal/inputerr"
	"brightfold/internal/onnx"
)

// ModelFolder file names.
const (
	ModelFile = "model.onnx"
	CardFile  = "card.json"
)

// Size limits for model folder members, so a hostile zip cannot exhaust memory.
const (
	MaxModelBytes = 1 << 30
	MaxCardBytes  = 64 << 20
)

// ModelFolder is a loaded, checked model folder.
type ModelFolder struct {
	Source string // folder, zip or embedded name it came from
	Card   *Card
	// Model is the ONNX model as given; SessionModel is what the session
	// loads: Model with the feature tensor added to the graph outputs when
	// it was an intermediate tensor.
	Model        []byte
	SessionModel []byte
	SHA256       string
	Graph        GraphIO
}

// GraphIO is what the model folder check found in the ONNX onnx.
type GraphIO struct {
	Inputs        []string // "name float32 [batch 1 48 48 48]"
	Outputs       []string
	AddedOutputs  []string // intermediate tensors exposed as outputs
	BatchDynamic  bool
	Opset         int64
	Producer      string
	NodeCount     int
	ParameterSize int // number of initializer values
}

// LoadModelFolder reads and checks a model folder from a folder or a .zip of one.
// Problems are input errors naming the model folder and the field or reason.
func LoadModelFolder(p string) (*ModelFolder, error) {
	fi, err := os.Stat(p)
	if err != nil {
		return nil, inputerr.Wrap(p, fmt.Errorf("model folder: %w", err))
	}
	var fsys fs.FS
	if fi.IsDir() {
		root, err := os.OpenRoot(p)
		if err != nil {
			return nil, inputerr.Wrap(p, fmt.Errorf("model folder: %w", err))
		}
		defer root.Close()
		fsys = rootFS{root}
	} else if !fi.Mode().IsRegular() {
		return nil, inputerr.New(p, "model folder is neither a folder nor a regular .zip file (mode %v)", fi.Mode().Type())
	} else {
		zr, err := zip.OpenReader(p)
		if err != nil {
			return nil, inputerr.New(p, "model folder is neither a folder nor a readable .zip: %v", err)
		}
		defer zr.Close()
		fsys = &zr.Reader
	}
	b, err := LoadModelFolderFS(fsys)
	if err != nil {
		return nil, inputerr.Wrap(p, err)
	}
	b.Source = p
	return b, nil
}

// LoadModelFolderFS reads and checks a model folder whose files are at the top of fsys,
// or inside its single top-level folder (as a zip of a folder has them).
func LoadModelFolderFS(fsys fs.FS) (*ModelFolder, error) {
	if zr, ok := fsys.(*zip.Reader); ok {
		if err := checkZipSizes(zr); err != nil {
			return nil, err
		}
	}
	dir, err := modelRoot(fsys)
	if err != nil {
		return nil, err
	}
	cardBytes, err := readLimited(fsys, path.Join(dir, CardFile), MaxCardBytes)
	if err != nil {
		return nil, err
	}
	card, err := ParseCard(cardBytes)
	if err != nil {
		return nil, err
	}
	model, err := readLimited(fsys, path.Join(dir, ModelFile), ModelByteLimit())
	if err != nil {
		return nil, err
	}
	if err := loadAlignment(fsys, dir, card); err != nil {
		return nil, err
	}
	return NewModelFolder(card, model)
}

// NewModelFolder checks a parsed card against model bytes: the sha256, the input
// name, shape and type, and the output names, adding an intermediate feature
// tensor to the graph outputs.
func NewModelFolder(card *Card, model []byte) (*ModelFolder, error) {
	sum := sha256.Sum256(model)
	got := hex.EncodeToString(sum[:])
	if got != card.ModelSHA256 {
		return nil, fmt.Errorf("%s: sha256 %s does not match card.json model_sha256 %s (the model was changed or swapped)", ModelFile, got, card.ModelSHA256)
	}
	m, err := onnx.Decode(model)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", ModelFile, err)
	}
	b := &ModelFolder{Card: card, Model: model, SHA256: got}
	if err := b.checkGraph(m); err != nil {
		return nil, err
	}
	b.SessionModel = model
	if len(b.Graph.AddedOutputs) > 0 {
		if b.SessionModel, err = m.Encode(); err != nil {
			return nil, fmt.Errorf("%s: re-encode with added outputs: %w", ModelFile, err)
		}
	}
	return b, nil
}

func (b *ModelFolder) checkGraph(m *onnx.Model) error {
	g := m.Graph
	c := b.Card
	b.Graph = GraphIO{Opset: m.Opset(""), Producer: strings.TrimSpace(m.ProducerName + " " + m.ProducerVersion), NodeCount: len(g.Nodes)}
	for _, init := range g.Initializers {
		if init.Tensor != nil {
			b.Graph.ParameterSize += len(init.Tensor.Data) + len(init.Tensor.Ints)
		}
	}
	if err := checkConstantSizes(g); err != nil {
		return err
	}
	real := g.RealInputs()
	for _, in := range real {
		b.Graph.Inputs = append(b.Graph.Inputs, describe(in))
	}
	for _, out := range g.Outputs {
		b.Graph.Outputs = append(b.Graph.Outputs, describe(out))
	}
	if len(real) != 1 {
		return fmt.Errorf("card.json: input.name: the graph has %d inputs %v; only one-input models are supported", len(real), b.Graph.Inputs)
	}
	if err := checkInput(c.Input, real[0]); err != nil {
		return err
	}
	b.Graph.BatchDynamic = !real[0].Shape[0].Known
	for _, o := range []struct{ path, name string }{{"outputs.logits", c.Outputs.Logits}, {"outputs.features", c.Outputs.Features}} {
		if isOutput(g, o.name) {
			continue
		}
		if g.Producer(o.name) == nil {
			return fmt.Errorf("card.json: %s: %q is not a tensor of the graph (outputs: %v)", o.path, o.name, b.Graph.Outputs)
		}
		if err := m.AddOutput(o.name); err != nil {
			return fmt.Errorf("card.json: %s: %w", o.path, err)
		}
		b.Graph.AddedOutputs = append(b.Graph.AddedOutputs, o.name)
	}
	for _, out := range g.Outputs {
		if out.Name == c.Outputs.Logits && out.HasShape && len(out.Shape) == 2 && out.Shape[1].Known && out.Shape[1].Value != int64(c.NumLogits()) {
			return fmt.Errorf("card.json: outputs.logits: graph gives %d logits, the card's %d classes with %s need %d", out.Shape[1].Value, len(c.Classes), c.Outputs.Activation, c.NumLogits())
		}
	}
	return nil
}

func checkInput(spec InputSpec, in *onnx.ValueInfo) error {
	if in.Name != spec.Name {
		return fmt.Errorf("card.json: input.name: %q is not the graph's input %q", spec.Name, in.Name)
	}
	if !in.IsTensor() || in.ElemType != onnx.Float {
		return fmt.Errorf("card.json: input.data_type: card says %s, the graph input %q is %v", spec.DataType, in.Name, in.ElemType)
	}
	if !in.HasShape || len(in.Shape) != len(spec.Shape) {
		return fmt.Errorf("card.json: input.shape: card gives %d dimensions, the graph input has %d", len(spec.Shape), len(in.Shape))
	}
	for i, d := range in.Shape {
		want := spec.Shape[i]
		switch {
		case d.Known && d.Value != want:
			return fmt.Errorf("card.json: input.shape[%d]: card says %d, the graph says %d", i, want, d.Value)
		case !d.Known && i > 0:
			// a dynamic spatial or channel dimension accepts the card's value
		case !d.Known && want != -1:
			return fmt.Errorf("card.json: input.shape[0]: the graph's batch is dynamic (%s); the card must say -1, not %d", d, want)
		}
	}
	return nil
}

func isOutput(g *onnx.Graph, name string) bool {
	for _, o := range g.Outputs {
		if o.Name == name {
			return true
		}
	}
	return false
}

func describe(v *onnx.ValueInfo) string {
	dims := make([]string, len(v.Shape))
	for i, d := range v.Shape {
		dims[i] = d.String()
	}
	return fmt.Sprintf("%s %v [%s]", v.Name, v.ElemType, strings.Join(dims, " "))
}

// maxZipRatio bounds the compression ratio of a model folder member: ONNX models
// and JSON compress a few times at most, so a far higher ratio marks a zip
// bomb, which is refused before anything is inflated.
const maxZipRatio = 200

// checkZipSizes refuses a zip whose card or model declares more bytes than
// the limits or an implausible compression ratio. (archive/zip also stops a
// member that inflates beyond its declared size.)
func checkZipSizes(zr *zip.Reader) error {
	if len(zr.File) > 10000 {
		return fmt.Errorf("model folder: zip holds %d entries; a model folder holds %s and %s", len(zr.File), ModelFile, CardFile)
	}
	for _, f := range zr.File {
		limit := uint64(0)
		switch path.Base(f.Name) {
		case ModelFile:
			limit = uint64(ModelByteLimit())
		case CardFile:
			limit = MaxCardBytes
		default:
			continue
		}
		if f.UncompressedSize64 > limit {
			return fmt.Errorf("model folder: %s declares %d bytes, more than the limit of %d (%s raises it for %s)", f.Name, f.UncompressedSize64, limit, ModelByteLimitEnv, ModelFile)
		}
		if f.UncompressedSize64 > 1<<20 && f.UncompressedSize64 > maxZipRatio*(f.CompressedSize64+1) {
			return fmt.Errorf("model folder: %s inflates %d bytes to %d, an implausible ratio (a zip bomb?)", f.Name, f.CompressedSize64, f.UncompressedSize64)
		}
	}
	return nil
}

// modelRoot finds the folder holding card.json: the top, or the only
// top-level folder.
func modelRoot(fsys fs.FS) (string, error) {
	if _, err := fs.Stat(fsys, CardFile); err == nil {
		return ".", nil
	}
	entries, err := fs.ReadDir(fsys, ".")
	if err != nil {
		return "", fmt.Errorf("model folder: %w", err)
	}
	var dirs []string
	for _, e := range entries {
		if e.IsDir() && !strings.HasPrefix(e.Name(), ".") && e.Name() != "__MACOSX" {
			dirs = append(dirs, e.Name())
		}
	}
	if len(dirs) == 1 {
		if _, err := fs.Stat(fsys, path.Join(dirs[0], CardFile)); err == nil {
			return dirs[0], nil
		}
	}
	return "", fmt.Errorf("model folder: no %s (a model folder holds %s and %s)", CardFile, ModelFile, CardFile)
}

func readLimited(fsys fs.FS, name string, limit int64) ([]byte, error) {
	f, err := fsys.Open(name)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("model folder: no %s", path.Base(name))
		}
		return nil, fmt.Errorf("model folder: %w", err)
	}
	defer f.Close()
	var buf bytes.Buffer
	if st, err := f.Stat(); err == nil {
		if !st.Mode().IsRegular() {
			return nil, fmt.Errorf("model folder: %s is not a regular file", path.Base(name))
		}
		if st.Size() > limit {
			return nil, fmt.Errorf("model folder: %s is %d bytes, more than the limit of %d (%s raises it)", path.Base(name), st.Size(), limit, ModelByteLimitEnv)
		}
		buf.Grow(int(st.Size()) + 1)
	}
	n, err := io.Copy(&buf, io.LimitReader(f, limit+1))
	if err != nil {
		return nil, fmt.Errorf("model folder: read %s: %w", path.Base(name), err)
	}
	if n > limit {
		return nil, fmt.Errorf("model folder: %s is larger than the limit of %d bytes (%s raises it)", path.Base(name), limit, ModelByteLimitEnv)
	}
	return buf.Bytes(), nil
}

// WriteModelFolderDir writes card and model into dir (created if needed), setting
// the card's model_sha256 from the model bytes. Files are written atomically.
func WriteModelFolderDir(dir string, card *Card, model []byte) error {
	sum := sha256.Sum256(model)
	c := *card
	c.ModelSHA256 = hex.EncodeToString(sum[:])
	if err := c.Validate(); err != nil {
		return fmt.Errorf("card: %w", err)
	}
	cb, err := MarshalCard(&c)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	if err := atomicfile.WriteBytes(filepath.Join(dir, ModelFile), model); err != nil {
		return err
	}
	return atomicfile.WriteBytes(filepath.Join(dir, CardFile), cb)
}
