package api

// SetAnswerFault makes every write's unit (and a run's answer check) ask
// fault after its answer is made and before the commit; an error fails the
// request with 500 as a failed encoding would. Tests only.
func SetAnswerFault(s *Server, fault func(op string) error) { s.answerFault = fault }
