//! A least-recently-used map bounded by bytes, for the caches of cost models, prepared maps and
//! frame pyramids: what they hold is known in bytes, not in entries.

/// A least-recently-used cache bounded by the bytes its entries are said to hold (the `lru`
/// crate keeps the order; this keeps the count of bytes).
pub struct ByteLru<K: std::hash::Hash + Eq, V> {
    entries: lru::LruCache<K, (V, usize)>,
    bytes: usize,
    budget: usize,
}

impl<K: std::hash::Hash + Eq, V: Clone> ByteLru<K, V> {
    pub fn new(budget: usize) -> Self {
        Self {
            entries: lru::LruCache::unbounded(),
            bytes: 0,
            budget,
        }
    }

    /// The entry, now the most recently used.
    pub fn get(&mut self, key: &K) -> Option<V> {
        self.entries.get(key).map(|(v, _)| v.clone())
    }

    /// Keeps `value` (of `size` bytes), dropping the least recently used entries until it fits.
    /// A value larger than the whole budget is not kept: it would evict everything else.
    pub fn put(&mut self, key: K, value: V, size: usize) {
        if size > self.budget {
            return;
        }
        if let Some((_, old)) = self.entries.pop(&key) {
            self.bytes -= old;
        }
        while self.bytes + size > self.budget {
            let Some((_, (_, b))) = self.entries.pop_lru() else {
                break;
            };
            self.bytes -= b;
        }
        self.entries.put(key, (value, size));
        self.bytes += size;
    }

    /// Bytes held now.
    pub fn bytes(&self) -> usize {
        self.bytes
    }
}
