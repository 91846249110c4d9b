package calib

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"time"
)

// SetSchema is the version of the JSON layout that EncodeSet writes.
const SetSchema = 1

// maxSetBytes bounds what DecodeSet reads.
const maxSetBytes = 1 << 20

// Set is the calibration set of one bench at one time: what a scan used to
// turn stage mm, attenuator degrees and µW into GDD, power and pulse area.
// Sets are versioned per bench: Version counts up each time the bench's set
// changes, so a scan records (bench, Version) and the set itself.
type Set struct {
	// Schema is the JSON layout version (SetSchema).
	Schema int `json:"schema"`
	// Version of this bench's calibration set: 0 is the nominal set (bench
	// file or simulated bench), then 1, 2, ….
	Version    int         `json:"version"`
	Stretcher  *Stretcher  `json:"stretcher,omitempty"`
	Attenuator *Attenuator `json:"attenuator,omitempty"`
	PulseArea  *PulseArea  `json:"pulse_area,omitempty"`
	Created    time.Time   `json:"created"`
	// Note says where the numbers came from (≤ 2000 characters).
	Note string `json:"note,omitempty"`
}

// Validate checks every calibration present; errors name the field, the
// value and the allowed range.
func (s Set) Validate() error {
	if s.Schema != SetSchema {
		return fmt.Errorf("calibration set: schema %d: want %d", s.Schema, SetSchema)
	}
	if s.Version < 0 {
		return fmt.Errorf("calibration set: version %d: want ≥ 0 (0 is the bench's nominal set)", s.Version)
	}
	if len(s.Note) > 2000 {
		return fmt.Errorf("calibration set: note of %d bytes: want ≤ 2000", len(s.Note))
	}
	if s.Stretcher != nil {
		if err := s.Stretcher.Validate(); err != nil {
			return fmt.Errorf("calibration set: %w", err)
		}
	}
	if s.Attenuator != nil {
		if err := s.Attenuator.Validate(); err != nil {
			return fmt.Errorf("calibration set: %w", err)
		}
	}
	if s.PulseArea != nil {
		if err := s.PulseArea.Validate(); err != nil {
			return fmt.Errorf("calibration set: %w", err)
		}
	}
	return nil
}

// EncodeSet validates s and writes it as indented JSON.
func EncodeSet(s Set) ([]byte, error) {
	if err := s.Validate(); err != nil {
		return nil, err
	}
	b, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("calibration set: encode: %w", err)
	}
	return append(b, '\n'), nil
}

// DecodeSet reads a set written by EncodeSet: one JSON object, no unknown
// fields, at most 1 MiB, and valid by Validate.
func DecodeSet(b []byte) (Set, error) {
	if len(b) > maxSetBytes {
		return Set{}, fmt.Errorf("calibration set: %d bytes: want ≤ %d", len(b), maxSetBytes)
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	var s Set
	if err := dec.Decode(&s); err != nil {
		return Set{}, fmt.Errorf("calibration set: decode: %w", err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return Set{}, errors.New("calibration set: decode: trailing data after the JSON object")
	}
	if err := s.Validate(); err != nil {
		return Set{}, err
	}
	return s, nil
}

// GDDPS2 converts a stage position through the set's stretcher.
func (s Set) GDDPS2(stageMM float64) (float64, error) {
	if s.Stretcher == nil {
		return 0, errors.New("calibration set: no stretcher calibration")
	}
	return s.Stretcher.GDDPS2(stageMM)
}

// AreaPi converts a power through the set's pulse-area calibration.
func (s Set) AreaPi(powerUW float64) (float64, error) {
	if s.PulseArea == nil {
		return math.NaN(), errors.New("calibration set: no pulse-area calibration")
	}
	return s.PulseArea.AreaPi(powerUW), nil
}
