package settle

// queue is a slice-backed double-ended queue with amortised O(1) push,
// popFront and popBack; the dead prefix is reclaimed once it is at least
// half of the slice.
type queue[T any] struct {
	buf  []T
	head int
}

func (q *queue[T]) len() int   { return len(q.buf) - q.head }
func (q *queue[T]) at(i int) T { return q.buf[q.head+i] }
func (q *queue[T]) front() T   { return q.buf[q.head] }
func (q *queue[T]) back() T    { return q.buf[len(q.buf)-1] }
func (q *queue[T]) push(v T)   { q.buf = append(q.buf, v) }
func (q *queue[T]) popBack() T { v := q.back(); q.buf = q.buf[:len(q.buf)-1]; return v }
func (q *queue[T]) clear()     { q.buf, q.head = q.buf[:0], 0 }

func (q *queue[T]) popFront() T {
	v := q.buf[q.head]
	q.head++
	if q.head >= 32 && q.head*2 >= len(q.buf) {
		n := copy(q.buf, q.buf[q.head:])
		q.buf, q.head = q.buf[:n], 0
	}
	return v
}
