package api

import (
	"context"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// CreateStandardMaterial records a reference material, stock solution or
// calibration level.
func (s *Server) CreateStandardMaterial(ctx context.Context, req oapi.CreateStandardMaterialRequestObject) (oapi.CreateStandardMaterialResponseObject, error) {
	p := mustPrincipal(ctx)
	b := req.Body
	in := lab.MaterialInput{Code: string(b.Code), Kind: string(b.Kind), ExpiresAt: b.ExpiresAt, Expanded: b.ExpandedUncertainty,
		K: b.CoverageFactor, Tolerance: b.Tolerance, Lot: deref(b.Lot), Supplier: deref(b.Supplier), PreparedAt: b.PreparedAt}
	if b.Analyte != nil {
		in.Analyte = *b.Analyte
	}
	if b.Unit != nil {
		in.Unit = *b.Unit
	}
	if b.Value != nil {
		in.Value = *b.Value
	}
	if b.Level != nil {
		in.Level = *b.Level
	}
	if b.PreparedFrom != nil {
		in.PreparedFrom = *b.PreparedFrom
	}
	if b.Preparation != nil {
		for _, st := range *b.Preparation {
			in.Preparation = append(in.Preparation, lab.PrepStep{AliquotML: st.AliquotMl, AliquotTolML: st.AliquotTolMl,
				FinalML: st.FinalMl, FinalTolML: st.FinalTolMl})
		}
	}
	m, err := s.lab.DefineMaterial(ctx, p, in)
	if err != nil {
		return nil, err
	}
	return oapi.CreateStandardMaterial201JSONResponse{Body: materialOut(m),
		Headers: oapi.CreateStandardMaterial201ResponseHeaders{Location: "/v1/standard-materials/" + m.Code}}, nil
}

// ListStandardMaterials lists every standard material.
func (s *Server) ListStandardMaterials(ctx context.Context, _ oapi.ListStandardMaterialsRequestObject) (oapi.ListStandardMaterialsResponseObject, error) {
	ms, err := s.lab.ListMaterials(ctx)
	if err != nil {
		return nil, err
	}
	out := oapi.ListStandardMaterials200JSONResponse{Materials: make([]oapi.StandardMaterial, 0, len(ms))}
	for i := range ms {
		out.Materials = append(out.Materials, materialOut(&ms[i]))
	}
	return out, nil
}

// GetStandardMaterial returns one standard material.
func (s *Server) GetStandardMaterial(ctx context.Context, req oapi.GetStandardMaterialRequestObject) (oapi.GetStandardMaterialResponseObject, error) {
	m, err := s.lab.GetMaterial(ctx, req.Code)
	if err != nil {
		return nil, err
	}
	return oapi.GetStandardMaterial200JSONResponse(materialOut(m)), nil
}

func materialOut(m *lab.Material) oapi.StandardMaterial {
	out := oapi.StandardMaterial{Code: m.Code, Kind: oapi.StandardMaterialKind(m.Kind), Analyte: m.Analyte, Unit: m.Unit,
		Value: m.Value, ExpandedUncertainty: m.Expanded, CoverageFactor: m.K, Tolerance: m.Tolerance,
		RelativeUncertainty: m.RelativeUncertainty, Lot: m.Lot, Supplier: m.Supplier, ExpiresAt: m.ExpiresAt,
		PreparedAt: m.PreparedAt, Preparation: make([]oapi.PreparationStep, 0, len(m.Preparation)),
		CreatedAt: m.CreatedAt, CreatedBy: m.CreatedBy}
	if m.Level != "" {
		out.Level = &m.Level
	}
	if m.PreparedFrom != "" {
		out.PreparedFrom = &m.PreparedFrom
	}
	for _, st := range m.Preparation {
		out.Preparation = append(out.Preparation, oapi.PreparationStep{AliquotMl: st.AliquotML, AliquotTolMl: st.AliquotTolML,
			FinalMl: st.FinalML, FinalTolMl: st.FinalTolML})
	}
	return out
}
