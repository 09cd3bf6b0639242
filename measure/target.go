package measure

import "github.com/loadline/loadline/target"

// TargetNodes gives the device cost model what it needs of each layer.
func TargetNodes(layers []Layer) []target.Node {
	out := make([]target.Node, len(layers))
	for i, l := range layers {
		out[i] = target.Node{Step: l.Step, Name: l.Node, Op: l.Op, Domain: l.Domain, DType: l.DType, Depthwise: l.Depthwise,
			MACs: l.MACs, InElements: l.InElements, OutElements: l.OutElements,
			WeightBytes: l.WeightBytes, ActivationBytes: l.ActivationBytes}
	}
	return out
}

// Estimate is the model's estimated latency and energy on t and the
// operators t's runtime lacks (target.Target.Cost, target.Target.Support),
// computed from the per-layer view: m must have been measured with
// Options.Layers. weights says where the device keeps weights ("flash",
// the default, or "ram").
func Estimate(m *Metrics, t *target.Target, weights string) *target.Estimate {
	nodes := TargetNodes(m.Layers)
	e := t.Cost(nodes, weights)
	t.Support(e, m.Format, nodes)
	return e
}
