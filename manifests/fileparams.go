package manifests

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
)

// MetadataKey is the Parquet key-value metadata key under which each
// output file carries the parameters of its scaled columns.
const MetadataKey = "lakescale.params"

// FileParams is the compact block embedded in every output file.
type FileParams struct {
	Version int          `json:"version"`
	Columns []FileColumn `json:"columns"`
}

// FileColumn is one scaled column's parameters inside an output file.
type FileColumn struct {
	Name   string `json:"name"`
	Method string `json:"method"`
	Center Float  `json:"center"`
	Scale  Float  `json:"scale"`
}

// EncodeFileParams returns the compact JSON text stored under MetadataKey.
func EncodeFileParams(p FileParams) (string, error) {
	p.Version = Version
	b, err := json.Marshal(p)
	if err != nil {
		return "", fmt.Errorf("encode file parameters: %w", err)
	}
	return string(b), nil
}

// DecodeFileParams parses the text stored under MetadataKey.
func DecodeFileParams(s string) (FileParams, error) {
	dec := json.NewDecoder(bytes.NewReader([]byte(s)))
	dec.DisallowUnknownFields()
	var p FileParams
	if err := dec.Decode(&p); err != nil {
		return FileParams{}, fmt.Errorf("%w: %s metadata: %w", ErrInvalid, MetadataKey, err)
	}
	if p.Version != Version {
		return FileParams{}, fmt.Errorf("%w: %s metadata version %d, want %d", ErrInvalid, MetadataKey, p.Version, Version)
	}
	return p, nil
}

// FileParams returns the block that every output of m carries.
func (m *Manifest) FileParams() FileParams {
	p := FileParams{Version: Version, Columns: make([]FileColumn, len(m.Columns))}
	for i, c := range m.Columns {
		p.Columns[i] = FileColumn{Name: c.Name, Method: c.Method, Center: c.Params.Center, Scale: c.Params.Scale}
	}
	return p
}

// Digest is the SHA-256 (lowercase hex) of the settings' canonical JSON.
func (s Settings) Digest() string {
	b, err := json.Marshal(s)
	if err != nil {
		// Settings holds only strings, slices and finite optional floats;
		// an error here is a programming error.
		panic(fmt.Sprintf("manifests: marshal settings: %v", err))
	}
	sum := sha256.Sum256(b)
	return hex.EncodeToString(sum[:])
}
