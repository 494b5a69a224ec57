"""Names of generated C symbols: valid identifiers that collide with nothing a firmware already has.

Shared by the table and PID renderers. A name must be a C identifier, not a C
keyword (C99 and C11, and the common ``asm``, ``bool``, ``true``, ``false``),
not a name of the C standard library a firmware commonly includes, and not
reserved to the implementation (two leading underscores, or an underscore and
a capital letter; C99 7.1.3).
"""

from __future__ import annotations

import re

from compensator.errors import ModelError

__all__ = ["MAX_SYMBOL_LENGTH", "check_function_name", "check_prefix", "is_reserved"]

_C_KEYWORDS = frozenset("""auto break case char const continue default do double else enum extern float for goto
if inline int long register restrict return short signed sizeof static struct switch typedef union unsigned void
volatile while _Bool _Complex _Imaginary _Alignas _Alignof _Atomic _Generic _Noreturn _Static_assert _Thread_local
asm bool true false NULL main""".split())

# Names of the C standard library (C99 headers a firmware commonly includes) that a generated symbol must not take.
_C_LIBRARY = frozenset("""abort abs acos acosh asin asinh atan atan2 atanh atexit atof atoi atol atoll bsearch calloc
cbrt ceil clearerr clock copysign cos cosh ctime difftime div erf erfc errno exit exp exp2 expm1 fabs fclose fdim
feof ferror fflush fgetc fgetpos fgets floor fma fmax fmin fmod fopen fprintf fputc fputs fread free freopen frexp
fscanf fseek fsetpos ftell fwrite getc getchar getenv gets hypot ilogb imaxabs imaxdiv isalnum isalpha isblank
iscntrl isdigit isgraph islower isprint ispunct isspace isupper isxdigit labs ldexp ldiv lgamma llabs lldiv llrint
llround localeconv localtime log log10 log1p log2 logb longjmp lrint lround malloc mblen mbstowcs mbtowc memchr
memcmp memcpy memmove memset mktime modf nan nearbyint nextafter nexttoward perror pow printf putc putchar puts
qsort raise rand realloc remainder remove remquo rename rewind rint round scalbln scalbn scanf setbuf setjmp
setlocale setvbuf signal sin sinh snprintf sprintf sqrt srand sscanf strcat strchr strcmp strcoll strcpy strcspn
strerror strftime strlen strncat strncmp strncpy strpbrk strrchr strspn strstr strtod strtof strtok strtol strtold
strtoll strtoul strtoull strxfrm system tan tanh tgamma time tmpfile tmpnam tolower toupper trunc ungetc va_arg
va_copy va_end va_start vfprintf vprintf vsnprintf vsprintf wcstombs wctomb assert offsetof size_t ptrdiff_t
int8_t int16_t int32_t int64_t uint8_t uint16_t uint32_t uint64_t intptr_t uintptr_t intmax_t uintmax_t
FILE EOF stdin stdout stderr""".split())

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")

#: Longest ``prefix + name``: every derived symbol stays within the 63 significant characters C99 guarantees.
MAX_SYMBOL_LENGTH = 40

def is_reserved(word: str) -> bool:
    """Whether ``word`` is reserved to the C implementation (C99 7.1.3).

    Parameters
    ----------
    word : str
    """
    return word.startswith("__") or bool(re.match(r"_[A-Z]", word))


def check_function_name(name: str) -> str:
    """Return ``name`` if it is a usable C identifier, else raise ``ModelError``.

    Parameters
    ----------
    name : str
        Lookup function name: letters, digits and underscores, at most 40
        characters, not starting with a digit, not a C keyword, not a name of
        the C standard library and not reserved (``__x``, ``_X``).
    """
    if not isinstance(name, str) or not _IDENT.match(name) or len(name) > MAX_SYMBOL_LENGTH:
        raise ModelError(f"function name {name!r} is not a usable C identifier (letters, digits, underscores, "
                         f"not starting with a digit; at most {MAX_SYMBOL_LENGTH} characters)", key="name")
    if name in _C_KEYWORDS:
        raise ModelError(f"function name {name!r} is not a usable C identifier: it is a C keyword", key="name")
    if name in _C_LIBRARY:
        raise ModelError(f"function name {name!r} is not a usable C identifier: it collides with the C standard "
                         "library", key="name")
    if is_reserved(name):
        raise ModelError(f"function name {name!r} is not a usable C identifier: names starting with two "
                         "underscores or an underscore and a capital are reserved", key="name")
    return name


def check_prefix(prefix: str) -> str:
    """Return ``prefix`` if every symbol can start with it, else raise ``ModelError``.

    Parameters
    ----------
    prefix : str
        Empty, or letters, digits and underscores not starting with a digit
        and not reserved (``__``, ``_X``), e.g. ``"hut_"``.
    """
    if prefix == "":
        return prefix
    if not isinstance(prefix, str) or not _IDENT.match(prefix) or is_reserved(prefix):
        raise ModelError(f"prefix {prefix!r} cannot start a C identifier (letters, digits, underscores, not "
                         "starting with a digit, two underscores or an underscore and a capital)", key="prefix")
    return prefix


