"""Every word of the report, the draft and the e-mail, in one package.

- :mod:`~sitrep.render.wording.formats`: how numbers, intervals and lists print;
- :mod:`~sitrep.render.wording.sentences`: key messages and indicator notes;
- :mod:`~sitrep.render.wording.methods`: the methods and cautions sections;
- :mod:`~sitrep.render.wording.captions`: figure titles, captions, alternative text;
- :mod:`~sitrep.render.wording.plain`: the plain-language draft for communications staff;
- :mod:`~sitrep.render.wording.mail`: the e-mail subject line.

Each sentence is a pure function of plain typed values (never of the
configuration object), tested in ``tests/test_wording.py``; the formulas and
sources behind the words are in ``docs/methods.md``.
"""
