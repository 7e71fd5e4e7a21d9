package correlate

// queue is a max-heap of candidate points keyed by the best ZNCC of their
// converged neighbours; ties go to the lower index. Stale entries (a point
// already computed, or a lower key than its current one) are skipped on pop.
type queue struct {
	key []float64
	idx []int32
}

func (q *queue) less(a, b int) bool {
	if q.key[a] != q.key[b] {
		return q.key[a] > q.key[b]
	}
	return q.idx[a] < q.idx[b]
}

func (q *queue) swap(a, b int) {
	q.key[a], q.key[b] = q.key[b], q.key[a]
	q.idx[a], q.idx[b] = q.idx[b], q.idx[a]
}

func (q *queue) push(key float64, idx int32) {
	q.key = append(q.key, key)
	q.idx = append(q.idx, idx)
	for i := len(q.key) - 1; i > 0; {
		p := (i - 1) / 2
		if !q.less(i, p) {
			break
		}
		q.swap(i, p)
		i = p
	}
}

func (q *queue) pop() (float64, int32) {
	k, x := q.key[0], q.idx[0]
	last := len(q.key) - 1
	q.swap(0, last)
	q.key, q.idx = q.key[:last], q.idx[:last]
	for i := 0; ; {
		l, rr, b := 2*i+1, 2*i+2, i
		if l < last && q.less(l, b) {
			b = l
		}
		if rr < last && q.less(rr, b) {
			b = rr
		}
		if b == i {
			break
		}
		q.swap(i, b)
		i = b
	}
	return k, x
}

func (q *queue) len() int { return len(q.key) }
