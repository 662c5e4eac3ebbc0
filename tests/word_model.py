"""A machine-word model of viper, in CPython, for the device's own viper source.

load(module, bits) re-executes a firmware_py module with each @micropython.viper function
rewritten so that every arithmetic result (binary and unary operators, augmented assignments)
passes through Word.wrap: the value is checked against the signed 32-bit range and wrapped to
the word as the hardware would, and every shift count is checked to lie below 32. The pointer
casts become Ptr objects that behave as viper's do on that word: loads zero-extend (a 32-bit
load on a 32-bit word is the whole word, read as signed), stores keep the low bits of the
element. SX32 takes the value the port would give it (0 on 32-bit words, 32 on 64-bit ones).

What the model is for: if the results of the rewritten functions equal those of the originals
(which run on Python ints, with no wrap at all) and no check fired, then no intermediate left the
signed 32-bit range and the sign extensions are right for zero-extending loads, on that word
size. Viper semantics as documented for MicroPython (docs "Maximising MicroPython speed": viper
ints wrap at the machine word; pointer loads zero-extend) and as the unix port shows.
"""
import array
import ast
import inspect
import types


class Word:
    """Wrap and check arithmetic results on a `bits`-bit machine word."""

    def __init__(self, bits):
        self.bits = bits
        self.out_of_range = []       # (function, value) of results outside signed 32 bits
        self.bad_shifts = []         # (function, count) of shift counts the word cannot take

    def wrap(self, v, where):
        if not -2**31 <= v < 2**31 and not (self.bits == 64 and where.endswith("<<sx")):
            self.out_of_range.append((where, v))
        m = 1 << self.bits
        v &= m - 1
        return v - m if v >> (self.bits - 1) else v

    def shift(self, count, where):
        # the boards' 32-bit words: counts 0..31 (SX32 is 0 there); a 64-bit word also takes 32
        if not 0 <= count < (32 if self.bits == 32 else 33):
            self.bad_shifts.append((where, count))
        return count


class Ptr:
    """ptr8/16/32(buf) on a word: zero-extending loads, truncating stores."""

    def __init__(self, buf, width, word):
        self.buf = buf
        self.width = width
        self.word = word
        signed = isinstance(buf, array.array) and buf.typecode in "bhil" or (
            isinstance(buf, memoryview) and buf.format in "bhil")
        self.signed = signed

    def __getitem__(self, i):
        v = self.buf[i] & ((1 << self.width) - 1)          # zero-extend
        if self.width == self.word.bits and v >> (self.width - 1):
            v -= 1 << self.width                           # the whole word, read as signed
        return v

    def __setitem__(self, i, v):
        v &= (1 << self.width) - 1
        if self.signed and v >> (self.width - 1):
            v -= 1 << self.width
        self.buf[i] = v


class _Rewrite(ast.NodeTransformer):
    """Arithmetic inside viper functions through W.wrap, shift counts through W.shift."""

    def __init__(self):
        self.fn = ""

    def visit_FunctionDef(self, node):
        if not any(ast.unparse(d) == "micropython.viper" for d in node.decorator_list):
            return node
        self.fn = node.name
        node.decorator_list = []
        self.generic_visit(node)
        self.fn = ""
        return node

    def _wrap(self, expr, tag=""):
        call = ast.Call(ast.Attribute(ast.Name("W", ast.Load()), "wrap", ast.Load()),
                        [expr, ast.Constant(self.fn + tag)], [])
        return ast.copy_location(call, expr)

    def _count(self, node):
        if isinstance(node.op, (ast.LShift, ast.RShift)):
            node.right = ast.Call(ast.Attribute(ast.Name("W", ast.Load()), "shift", ast.Load()),
                                  [node.right, ast.Constant(self.fn)], [])

    def visit_BinOp(self, node):
        self.generic_visit(node)
        if not self.fn:
            return node
        self._count(node)
        tag = "<<sx" if isinstance(node.op, ast.LShift) and ast.unparse(node.right).find("sx") >= 0 else ""
        return self._wrap(node, tag)

    def visit_UnaryOp(self, node):
        self.generic_visit(node)
        return self._wrap(node) if self.fn and isinstance(node.op, ast.USub) else node

    def visit_AugAssign(self, node):
        self.generic_visit(node)
        if not self.fn:
            return node
        load = ast.parse(ast.unparse(node.target), mode="eval").body
        op = ast.BinOp(load, node.op, node.value)
        self._count(op)
        return ast.copy_location(ast.Assign([node.target], self._wrap(op)), node)


def load(module, bits, source=None):
    """(rewritten copy of `module`, its Word) for a `bits`-bit machine word; source: the
    module's text, if not its file's."""
    tree = _Rewrite().visit(ast.parse(source or inspect.getsource(module)))
    ast.fix_missing_locations(tree)
    word = Word(bits)
    mod = types.ModuleType(module.__name__ + "_word%d" % bits)
    mod.__dict__["W"] = word
    exec(compile(tree, getattr(module, "__file__", module.__name__), "exec"), mod.__dict__)
    mod.ptr8 = lambda b: Ptr(b, 8, word)
    mod.ptr16 = lambda b: Ptr(b, 16, word)
    mod.ptr32 = lambda b: Ptr(b, 32, word)
    mod.SX32 = 32 if bits == 64 else 0
    return mod, word
