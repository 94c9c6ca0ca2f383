"""Special functions for the static job: normal, incomplete gamma and beta.

The static path needs a handful of them on small arrays (at most a few
thousand values a call): chi-square quantiles for the Allan intervals, the
copula of the bootstrap replicates, the Harrell–Davis weights. Importing
``scipy.special`` for them costs a fresh process 0.1-0.2 s (it loads scipy's
array-API layer and numpy.f2py), more than the calls themselves; these use
numpy and the ``math`` module only and agree with scipy.special to 1e-12
relative or better (tested there; where scipy.special loses digits, at shape
parameters above ~2e5 and in far tails, they are tested against mpmath).

References
----------
M. J. Wichura, "Algorithm AS 241: The percentage points of the normal
distribution", Applied Statistics 37(3), 477-484, 1988 (PPND16).
W. H. Press, S. A. Teukolsky, W. T. Vetterling, B. P. Flannery, Numerical
Recipes, 3rd ed., Cambridge University Press, 2007, §6.2 (incomplete gamma:
series and Lentz continued fraction) and §6.4 (incomplete beta).
NIST Digital Library of Mathematical Functions, https://dlmf.nist.gov: 5.11
(Stirling's series), 8.7.3 (small-x series of Q), 8.9.2 (continued fraction),
8.12 (uniform asymptotic expansion for large a), 8.17.22 (incomplete beta).
N. M. Temme, "The asymptotic expansion of the incomplete gamma functions",
SIAM J. Math. Anal. 10(4), 757-766, 1979.
A. R. DiDonato, A. H. Morris, "Computation of the incomplete gamma function
ratios and their inverse", ACM TOMS 12(4), 377-393, 1986 (choice of method by
region of (a, x)).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .. import _native
from .._native import special_calls

_EPS = 2.220446049250313e-16  # double precision's unit roundoff times two
_TINY = 1e-300  # Lentz's guard against a zero denominator (Numerical Recipes §5.2)
_SQRT_HALF = 0.70710678118654752440
_LOG_SQRT_2PI = 0.91893853320467274178  # ln √(2π)
_BLOCK = 8  # loop steps between convergence checks

# Wichura (1988), AS 241 PPND16: numerator and denominator coefficients, constant
# term first, for |p − ½| ≤ 0.425 (A/B), r = √(−ln min(p, 1−p)) ≤ 5 (C/D), r > 5 (E/F).
_A = (3.3871328727963666080e0, 1.3314166789178437745e2, 1.9715909503065514427e3,
      1.3731693765509461125e4, 4.5921953931549871457e4, 6.7265770927008700853e4,
      3.3430575583588128105e4, 2.5090809287301226727e3)
_B = (1.0, 4.2313330701600911252e1, 6.8718700749205790830e2, 5.3941960214247511077e3,
      2.1213794301586595867e4, 3.9307895800092710610e4, 2.8729085735721942674e4,
      5.2264952788528545610e3)
_C = (1.42343711074968357734e0, 4.63033784615654529590e0, 5.76949722146069140550e0,
      3.64784832476320460504e0, 1.27045825245236838258e0, 2.41780725177450611770e-1,
      2.27238449892691845833e-2, 7.74545014278341407640e-4)
_D = (1.0, 2.05319162663775882187e0, 1.67638483018380384940e0, 6.89767334985100004550e-1,
      1.48103976427480074590e-1, 1.51986665636164571966e-2, 5.47593808499534494600e-4,
      1.05075007164441684324e-9)
_E = (6.65790464350110377720e0, 5.46378491116411436990e0, 1.78482653991729133580e0,
      2.96560571828504891230e-1, 2.65321895265761230930e-2, 1.24266094738807843860e-3,
      2.71155556874348757815e-5, 2.01033439929228813265e-7)
_F = (1.0, 5.99832206555887937690e-1, 1.36929880922735805310e-1, 1.48753612908506148525e-2,
      7.86869131145613259100e-4, 1.84631831751005468180e-5, 1.42151175831644588870e-7,
      2.04426310338993978564e-15)

# Stirling's series of ln Γ*(z): B_2k / (2k (2k − 1)), k = 1 … 8 (DLMF 5.11.1, with
# the Bernoulli numbers of DLMF Table 24.2.1).
_STIRLING = (1.0 / 12.0, -1.0 / 360.0, 1.0 / 1260.0, -1.0 / 1680.0, 1.0 / 1188.0,
             -691.0 / 360360.0, 1.0 / 156.0, -3617.0 / 122400.0)


# Taylor coefficients d[k][n] of c_k(η) = Σ_n d[k][n] η^n in Temme's uniform expansion
# (DLMF 8.12.8-8.12.9), exact rationals rounded: tools/make_gamma_coefficients.py.
_TEMME = np.array([
    [-0.3333333333333333, 0.08333333333333333, -0.014814814814814815, 0.0011574074074074073,
     0.0003527336860670194, -0.0001787551440329218, 3.919263178522438e-05,
     -2.185448510679992e-06, -1.85406221071516e-06, 8.296711340953087e-07,
     -1.7665952736826078e-07, 6.707853543401498e-09, 1.0261809784240309e-08,
     -4.382036018453353e-09, 9.14769958223679e-10, -2.5514193994946248e-11,
     -5.830772132550426e-11, 2.4361948020667415e-11, -5.0276692801141755e-12,
     1.1004392031956135e-13, 3.371763262400985e-13, -1.392388722418162e-13,
     2.8534893807047445e-14, -5.139111834242572e-16, -1.9752288294349442e-15,
     8.099521156704561e-16, -1.6522531216398162e-16, 2.5305430097478883e-18,
     1.1686939738559576e-17, -4.770037049820485e-18],
    [-0.001851851851851852, -0.003472222222222222, 0.0026455026455026454,
     -0.0009902263374485596, 0.00020576131687242798, -4.018775720164609e-07,
     -1.8098550334489977e-05, 7.64916091608111e-06, -1.6120900894563446e-06,
     4.647127802807434e-09, 1.378633446915721e-07, -5.752545603517705e-08,
     1.1951628599778148e-08, -1.7543241719747647e-11, -1.0091543710600413e-09,
     4.162792991842583e-10, -8.56390702649298e-11, 6.067215101604758e-14,
     7.1624989648114856e-12, -2.933186643771437e-12, 5.996696365683689e-13,
     -2.1671786527323313e-16, -4.978339972369262e-14, 2.0291628823713425e-14,
     -4.13125571381061e-15, 8.286516239883097e-19, 3.4100308869333327e-16,
     -1.3854195302893971e-16, 2.812346653228875e-17, -3.406444194143029e-21],
    [0.004133597883597883, -0.0026813271604938273, 0.0007716049382716049,
     2.0093878600823047e-06, -0.0001073665322636516, 5.2923448829120125e-05,
     -1.2760635188618728e-05, 3.423578734096138e-08, 1.3721957309062934e-06,
     -6.298992138380055e-07, 1.4280614206064242e-07, -2.0477098421990866e-10,
     -1.409252991086752e-08, 6.228974084922022e-09, -1.3670488396617114e-09,
     9.428356159014678e-13, 1.2872252400089318e-10, -5.5645956134363323e-11,
     1.197593554636698e-11, -4.1689782251838634e-15, -1.0940640427884595e-12,
     4.662239946390136e-13, -9.905105763906907e-14, 1.8931876768373515e-17,
     8.859221872591127e-15, -3.737820398046405e-15, 7.868833639035156e-16,
     -9.000027395741211e-20, -6.928881229347671e-17, 2.9020384270164786e-17],
    [0.0006494341563786008, 0.00022947209362139917, -0.0004691894943952557,
     0.00026772063206283885, -7.561801671883977e-05, -2.396505113867297e-07,
     1.1082654115347302e-05, -5.6749528269915965e-06, 1.4230900732435883e-06,
     -2.7861080291528143e-11, -1.6958404091930278e-07, 8.099464905388083e-08,
     -1.9111168485973655e-08, 2.3928620439808118e-12, 2.0620131815488797e-09,
     -9.460496661855133e-10, 2.1541049775774907e-10, -1.388823336813903e-14,
     -2.1894761681963938e-11, 9.790998951171684e-12, -2.178219188018096e-12,
     6.208819573407901e-17, 2.126978363279737e-13, -9.344688791517433e-14,
     2.045367122678285e-14, -2.58260790403495e-19, -1.9405297673344544e-15,
     8.415979290484816e-16, -1.8200430439538226e-16, 1.0735443641247309e-21],
    [-0.0008618882909167117, 0.0007840392217200666, -0.0002990724803031902,
     -1.4638452578843418e-06, 6.641498215465122e-05, -3.968365047179435e-05,
     1.1375726970678419e-05, 2.507497226237533e-10, -1.6954149536558305e-06,
     8.907507532205309e-07, -2.292934834000805e-07, 2.956794137544049e-11,
     2.8865829742708783e-08, -1.4189739437803219e-08, 3.4463580499464896e-09,
     -2.3024517174528067e-13, -3.9409233028046403e-10, 1.86023389685045e-10,
     -4.356323005056618e-11, 1.278600101629623e-15, 4.67927502665792e-12,
     -2.149246470613483e-12, 4.908815614809652e-13, -6.33859148489156e-18,
     -5.045332069080094e-14, 2.2722958222901286e-14, -5.096082608472402e-15,
     3.0552097557171355e-20, 5.069021676310552e-16, -2.249383695648181e-16],
    [-0.00033679855336635813, -6.972813758365857e-05, 0.0002772753244959392,
     -0.00019932570516188847, 6.797780477937208e-05, 1.419062920643967e-07,
     -1.3594048189768693e-05, 8.018470256334202e-06, -2.291481176508095e-06,
     -3.252473551298454e-10, 3.4652846491085265e-07, -1.8447187191171344e-07,
     4.8240967037894184e-08, -1.7989466721743514e-14, -6.306194500013523e-09,
     3.162417628774568e-09, -7.840924253697429e-10, 5.192679165254041e-15,
     9.358944242306784e-11, -4.513426216163278e-11, 1.0799129993116828e-11,
     -3.661886712685252e-17, -1.210902069055155e-12, 5.680743584990564e-13,
     -1.3249659916340829e-13, 1.8987240764284076e-19, 1.4193390236794701e-14,
     -6.523214701424697e-15, 1.4925242636202885e-15, -8.800389458732369e-22],
    [0.0005313079364639922, -0.0005921664373536939, 0.0002708782096718045,
     7.902353232660328e-07, -8.153969367561969e-05, 5.61168275310625e-05,
     -1.8329116582843375e-05, -3.0796134506033047e-09, 3.465155368803609e-06,
     -2.0291327396058603e-06, 5.788792863149004e-07, 2.338630673826657e-13,
     -8.828600746330484e-08, 4.7435958880408125e-08, -1.2545415020710383e-08,
     8.649648858010293e-14, 1.6846058979264062e-09, -8.575492823577594e-10,
     2.1598224929232125e-10, -7.613230520476153e-16, -2.6639822008536144e-11,
     1.3065700536611057e-11, -3.1799163902367977e-12, 4.710976121367431e-18,
     3.6902800842763465e-13, -1.7612674046201426e-13, 4.179066786051478e-14,
     -2.5344679379178804e-20, -4.632065942001605e-15, 2.165145485964643e-15],
    [0.00034436760689237765, 5.171790908260592e-05, -0.00033493161081142234,
     0.0002812695154763237, -0.00010976582244684731, -1.2741009095484485e-07,
     2.7744451511563645e-05, -1.8263488805711332e-05, 5.7876949497350525e-06,
     4.93875893393627e-10, -1.0595367014026043e-06, 6.166714376110408e-07,
     -1.7562973359060463e-07, -1.297447328701544e-12, 2.695423606288966e-08,
     -1.4578352908731272e-08, 3.887645959386175e-09, -3.881002251019412e-17,
     -5.327994173877286e-10, 2.7437977643314844e-10, -6.995796092070568e-11,
     2.589986387486848e-17, 8.856689099669639e-12, -4.403168815871311e-12,
     1.0865561947091654e-12, -2.0467988447416678e-19, -1.2969794421692939e-13,
     6.278922059147728e-14, -1.5112948371679396e-14, 1.1708345473797399e-21],
    [-0.0006526239185953094, 0.0008394987206720873, -0.000438297098541721,
     -6.969091458420552e-07, 0.00016644846642067547, -0.00012783517679769218,
     4.629953263691304e-05, 4.557909867922708e-09, -1.0595271125805195e-05,
     6.783342904865167e-06, -2.1075476666258803e-06, -1.7213731432817144e-11,
     3.773587741611098e-07, -2.1867506700122867e-07, 6.220228804018927e-08,
     6.597703826733e-16, -9.590386497425686e-09, 5.213214492280807e-09,
     -1.3991589583935709e-09, 5.382058999060575e-16, 1.9484714275467745e-10,
     -1.0127287556389682e-10, 2.6077347197254926e-11, -5.090418699993299e-18,
     -3.3721464474854593e-12, 1.6953089140808568e-12, -4.2316254586191543e-13,
     3.3823327480704694e-20, 5.171393693611211e-14, -2.5337819883238846e-14],
    [-0.0005967612901927463, -7.204895416020011e-05, 0.0006782308837667328,
     -0.0006401475260262758, 0.00027750107634328704, 1.819700838046515e-07,
     -8.479507117068503e-05, 6.105192082501531e-05, -2.1073920183404862e-05,
     -8.858589014125599e-10, 4.5284535953805374e-06, -2.8427815022504407e-06,
     8.708234177864641e-07, 3.6886101871706966e-12, -1.534469519070206e-07,
     8.862466778790695e-08, -2.5184812301826817e-08, -1.0225912098215092e-14,
     3.896947075815478e-09, -2.1267304792235634e-09, 5.737013552805138e-10,
     -1.8877498501697116e-19, -8.093153869465787e-11, 4.23827232834492e-11,
     -1.1002224534207725e-11, 2.3327607706802836e-19, 1.4479903729175772e-12,
     -7.347967787383142e-13, 1.8518691673758749e-13, -1.9887568468966824e-21],
    [0.0013324454494800656, -0.0019144384985654776, 0.0011089369134596636,
     9.9324041226423e-07, -0.0005087450129309319, 0.00042735056665392886,
     -0.00016858853767910798, -8.1301893922785e-09, 4.5284402370562144e-05,
     -3.127053674781734e-05, 1.044986828530338e-05, 4.8435226265680926e-11,
     -2.148256587345626e-06, 1.329369701097492e-06, -4.029569309210103e-07,
     -1.756787766632329e-13, 7.014504316366825e-08, -4.040787734999483e-08,
     1.1474026743371964e-08, 3.964274685356394e-18, -1.7804938269892715e-09,
     9.748026254873165e-10, -2.6405338676507616e-10, 5.79487516340376e-18,
     3.764774955354384e-11, -1.983951296757828e-11, 5.185233656748139e-12,
     -5.749162558269406e-20, -6.926251638432814e-13, 3.542815745370807e-13],
    [0.001579727660730835, 0.00016251626278391583, -0.0020633421035543276,
     0.00213896861856891, -0.0010108559391263003, -3.99127055299192e-07,
     0.0003623502508476469, -0.00028143901463712157, 0.00010449513336495887,
     2.12114184918303e-09, -2.5779417251947842e-05, 1.7281818956040464e-05,
     -5.641377387290428e-06, -1.1024320105776174e-11, 1.1223224418895174e-06,
     -6.869339637952674e-07, 2.0653236975414888e-07, 4.6714772409838506e-14,
     -3.5609886164949055e-08, 2.0470855345905963e-08, -5.809173863328336e-09,
     -1.3328212875828647e-16, 9.035460439133513e-10, -4.959878251733084e-10,
     1.3481607129399748e-10, -1.670378498659395e-21, -1.939350490392558e-11,
     1.027416566641991e-11, -2.700750630126185e-12, 3.3260696116585926e-21],
    [-0.004072512119514016, 0.00640336283380807, -0.004041016108167662,
     -2.1837328028662328e-06, 0.002174044180125464, -0.001970044051841889,
     0.0008359546974796246, 1.9445447567109655e-08, -0.000257793871204217,
     0.00019009987368139304, -6.769649993743896e-05, -1.4440629666426571e-10,
     1.5712512518742267e-05, -1.0304008744776894e-05, 3.304517767401387e-06,
     7.982976024232571e-13, -6.4097794149313e-07, 3.8894624761300054e-07,
     -1.161834764494887e-07, -2.8168086305964423e-15, 1.9878012911297094e-08,
     -1.1407719956357511e-08, 3.2355857064185554e-09, 4.1759462466484876e-20,
     -5.042311271810582e-10, 2.7740247286170716e-10, -7.562101761668138e-11,
     9.6044764345341e-20, 1.0960864115705617e-11, -5.833137061908712e-12],
    [-0.0059475779383993, -0.0005401647678926045, 0.00879104135507679,
     -0.009857631558785612, 0.005013469503102154, 1.2807521786221875e-06,
     -0.0020626019342754685, 0.0017109128573523059, -0.000676953127141338,
     -6.901154567656214e-09, 0.00018855128143995903, -0.0001339521566349197,
     4.626318303352804e-05, 4.003423061332135e-11, -1.0255652921494033e-05,
     6.612086372797651e-06, -2.0913022027253007e-06, -2.095177564960382e-13,
     3.975602904199325e-07, -2.395621197881589e-07, 7.118288338214586e-08,
     8.925574871713252e-16, -1.2101547235064677e-08, 6.935061824833439e-09,
     -1.966146445385609e-09, -2.5932086373242068e-18, 3.069041962977549e-10,
     -1.6916097481155664e-10, 4.6228606139831213e-11, -2.356741685349519e-23],
    [0.01740202778752271, -0.02952788094569912, 0.020045875571402798,
     7.0289515966903405e-06, -0.012375421071343148, 0.011976293444235255,
     -0.0054156038466518525, -6.329089339641862e-08, 0.0018855118129005065,
     -0.001473473274825001, 0.0005551581009770838, 5.240683441255066e-10,
     -0.00014357913535784835, 9.91812932249433e-05, -3.346083474947831e-05,
     -3.5755837291098967e-12, 7.1560851960630075e-06, -4.551680262815553e-06,
     1.4236576649271474e-06, 1.8803149079275236e-14, -2.662340389892921e-07,
     1.5950642189595716e-07, -4.718751467384107e-08, -6.510781264821694e-17,
     7.979509102674677e-09, -4.567346319474522e-09, 1.294400971826025e-09,
     6.834550887513605e-22, -2.023315571737863e-10, 1.1170284611382989e-10],
    [0.03024912416090589, 0.0024817436002649977, -0.049939134373457025, 0.05991564300930787,
     -0.03248320760162339, -5.721296865210344e-06, 0.015085251778569354,
     -0.013261324005088445, 0.0055515262632426145, 3.026318225703001e-08,
     -0.0017229548406756724, 0.0012893570099929638, -0.00046845138348319875,
     -1.8302599378930445e-10, 0.00011449739014822654, -7.737856522124447e-05,
     2.5625836246985202e-05, 1.0766165332658074e-12, -5.324680928242262e-06,
     3.3496348630644643e-06, -1.038125312868401e-06, -5.608908533478749e-15,
     1.9150821930676722e-07, -1.1418365800203775e-07, 3.365442520915233e-08,
     2.393462293063064e-17, -5.66528360574477e-09, 3.2393825373757883e-09,
     -9.177589221007531e-10, -7.042454305683657e-20],
    [-0.09905102088015905, 0.17954011706123485, -0.12989606383463778,
     -3.1478872752284355e-05, 0.09051063527684813, -0.0928288244111844, 0.04441211283987781,
     2.7779236316835886e-07, -0.017229543805449696, 0.014182925050891573,
     -0.005621416163374734, -2.3959850918638095e-09, 0.0016029634366079909,
     -0.0011606784674435774, 0.00041001337768153875, 1.8365800753181603e-11,
     -9.58442565636559e-05, 6.364306233776471e-05, -2.0762506244890635e-05,
     -1.1806017999805486e-13, 4.213180823912094e-06, -2.6262241337013133e-06,
     8.077062049488396e-07, 5.996409690563338e-16, -1.47297373744462e-07,
     8.74633285071362e-08, -2.5697249818411037e-08, -2.0485919075678975e-18,
     4.308943135946845e-09, -2.461635545402602e-09],
    [-0.19994542198219728, -0.015056113040026424, 0.3647023946934849, -0.4643519231173355,
     0.26640934719197895, 3.403826602714719e-05, -0.13784338709329624, 0.1276467178337056,
     -0.056213828755200985, -1.7531508854830108e-07, 0.019235592956768112,
     -0.015088821281095316, 0.005740185445135012, 1.0622382710173866e-09,
     -0.0015335082692563998, 0.0010819320643228215, -0.0003737251019394563,
     -6.617090419433389e-12, 8.42636173809102e-05, -5.5150706827484874e-05,
     1.7769536448337793e-05, 3.879070571006568e-14, -3.5351369749902462e-06,
     2.1865832127706725e-06, -6.681284949240542e-07, -2.0073087916580175e-16,
     1.2065040783617624e-07, -7.138743081712979e-08, 2.0916582780149588e-08,
     8.569104876434622e-19],
    [0.7243860850402943, -1.3918010932653375, 1.0654143352413967, 0.0001876173868950258,
     -0.827055011761527, 0.8935243334782841, -0.44971003995291337, -1.6107401567546651e-06,
     0.1923559016527109, -0.1659770216004261, 0.06888222268181433, 1.391009172443142e-08,
     -0.021469115615086628, 0.016228980898865892, -0.005979601617258422,
     -1.1287468171928069e-10, 0.001516745111978496, -0.0010478634293554165,
     0.00035539072889105875, 8.162616536150783e-13, -7.777301344470886e-05,
     5.029141389162907e-05, -1.6035083877747675e-05, -5.0260094840152135e-15,
     3.1369106037108428e-06, -1.9274606320503096e-06, 5.856643178417008e-07,
     2.488850428326782e-17, -1.0486279258218482e-07, 6.185512512394489e-08],
    [1.6668949727276812, 0.1165462765994632, -3.3288393225018904, 4.469232548286404,
     -2.6977693045875806, -0.0002600667859891061, 1.5389017615694538, -1.4937962361134611,
     0.6888196463323315, 1.3077482004532885e-06, -0.2576296332559629, 0.2109767610212545,
     -0.08371440835921982, -7.792042747000674e-09, 0.024267923064833764,
     -0.017813678334552763, 0.006397033038886307, 4.9415957307924725e-11,
     -0.0015554602758916928, 0.0010561196918773697, -0.00035277184484116647,
     -3.0939103274354235e-13, 7.528585452877513e-05, -4.8186515801973e-05,
     1.5227272261135095e-05, 1.799281855730945e-15, -2.9361581925311357e-06,
     1.7937986285979237e-06, -5.42406532971453e-07, -9.248628203397012e-18],
])


def _horner(coeffs, r):
    """Σ coeffs[i] r^i, constant term first."""
    out = np.full_like(r, coeffs[-1])
    for c in coeffs[-2::-1]:
        out = out * r + c
    return out


def _map(fn, x: np.ndarray) -> np.ndarray:
    """A scalar ``math`` function applied to each element of a float array."""
    flat = x.ravel().tolist()
    return np.fromiter(map(fn, flat), dtype=float, count=len(flat)).reshape(x.shape)


def _as_float(*args):
    """Broadcast the arguments to float arrays of one shape (copies, never views)."""
    return [np.array(v, dtype=float) for v in np.broadcast_arrays(*[np.asarray(v, dtype=float)
                                                                    for v in args])]


def ndtr(x):
    """Standard normal cumulative distribution function Φ(x).

    Φ(x) = ½ + ½ erf(x/√2) for |x| < √2 and ½ erfc(|x|/√2) (or its complement)
    beyond, so both tails keep full relative precision (DLMF 7.2, 7.18).

    Parameters
    ----------
    x : array_like, any shape

    Returns
    -------
    ndarray or float
        Same shape as ``x``; NaN where ``x`` is NaN.
    """
    if _native.enabled():
        return special_calls.ndtr(x)
    t = np.asarray(x, dtype=float) * _SQRT_HALF
    out = np.empty_like(t)
    small = np.abs(t) < _SQRT_HALF
    out[small] = 0.5 + 0.5 * _map(math.erf, t[small])
    big = ~small
    tb = t[big]
    tail = 0.5 * _map(math.erfc, np.abs(tb))
    out[big] = np.where(tb > 0.0, 1.0 - tail, tail)
    return out[()]


def ndtri(p):
    """Inverse of :func:`ndtr`: the standard normal quantile Φ⁻¹(p).

    Wichura's algorithm AS 241 (PPND16, Applied Statistics 37(3), 1988): rational
    approximations in p − ½ near the centre and in √(−ln min(p, 1 − p)) in the
    tails, about 1e-16 relative.

    Parameters
    ----------
    p : array_like, any shape
        Probabilities in [0, 1].

    Returns
    -------
    ndarray or float
        Same shape as ``p``; −inf at 0, +inf at 1, NaN outside [0, 1].
    """
    if _native.enabled():
        return special_calls.ndtri(p)
    p = np.asarray(p, dtype=float)
    q = p - 0.5
    out = np.full(p.shape, np.nan)
    central = np.abs(q) <= 0.425
    if central.any():
        qc = q[central]
        r = 0.180625 - qc * qc
        out[central] = qc * _horner(_A, r) / _horner(_B, r)
    tail = ~central & (p > 0.0) & (p < 1.0)
    if tail.any():
        qt = q[tail]
        pt = p[tail]
        r = np.sqrt(-np.log(np.where(qt < 0.0, pt, 1.0 - pt)))
        val = np.empty_like(r)
        near = r <= 5.0
        if near.any():
            rn = r[near] - 1.6
            val[near] = _horner(_C, rn) / _horner(_D, rn)
        if not near.all():
            rf = r[~near] - 5.0
            val[~near] = _horner(_E, rf) / _horner(_F, rf)
        out[tail] = np.where(qt < 0.0, -val, val)
    out[p == 0.0] = -np.inf
    out[p == 1.0] = np.inf
    return out[()]


def _lgamma_star(z: np.ndarray) -> np.ndarray:
    """ln Γ*(z) = ln Γ(z) − (z − ½) ln z + z − ln √(2π), z > 0 finite.

    Stirling's series (DLMF 5.11.1) from z = 10, where eight terms reach double
    precision; ``math.lgamma`` below, where the subtraction loses nothing.
    """
    out = np.empty_like(z)
    big = z >= 10.0
    w = 1.0 / z[big]
    out[big] = w * _horner(_STIRLING, w * w)
    zs = z[~big]
    out[~big] = _map(math.lgamma, zs) - (zs - 0.5) * np.log(zs) + zs - _LOG_SQRT_2PI
    return out


def _log1pmx(m: np.ndarray) -> np.ndarray:
    """ln(1 + m) − m for −½ ≤ m ≤ 1 without cancellation.

    With s = m/(2 + m), ln(1 + m) = 2 artanh s, so ln(1 + m) − m =
    −s m + 2 s³ Σ_j s^(2j)/(2j + 3) (|s| ≤ ⅓: sixteen terms reach double precision).
    """
    s = m / (2.0 + m)
    s2 = s * s
    # Six terms reach double precision for s² < 1e-3 (|m| ≲ 0.06), sixteen for
    # |s| ≤ ⅓; each element's count depends on it alone.
    acc = _odd_series(s2, 6)
    wide = s2 >= 1e-3
    if wide.any():
        acc = np.where(wide, _odd_series(s2, 16), acc)
    return -s * m + 2.0 * s * s2 * acc


def _odd_series(s2: np.ndarray, terms: int) -> np.ndarray:
    """Σ_{j<terms} s2^j / (2j + 3)."""
    acc = np.full_like(s2, 1.0 / (2 * terms + 1))
    for j in range(terms - 2, -1, -1):
        acc = acc * s2 + 1.0 / (2 * j + 3)
    return acc


def _a_log_ratio(a: np.ndarray, log_t: np.ndarray, d: np.ndarray) -> np.ndarray:
    """a (ln t − (t − 1)) with a (t − 1) = d, accurate near t = 1 (``log_t`` is ln t)."""
    eps = d / a
    near = (eps >= -0.5) & (eps <= 1.0)
    small = a * _log1pmx(np.where(near, eps, 0.0))
    return np.where(near, small, a * log_t - d)


def _series_p(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Σ_n x^n / ((a+1)…(a+n)), so that P(a, x) = x^a e^−x / Γ(a+1) times it
    (Numerical Recipes §6.2, eq. 6.2.5; DLMF 8.7.1 with Kummer's transformation)."""
    out = np.ones_like(x)
    idx = np.arange(x.size)
    aa, xx = a, x
    term = np.ones_like(x)
    total = np.ones_like(x)
    n = 0
    while idx.size and n < 20000:
        for _ in range(_BLOCK):
            n += 1
            term = term * xx / (aa + n)
            total = total + term
        done = term <= _EPS * total
        out[idx[done]] = total[done]
        keep = ~done
        idx, aa, xx, term, total = idx[keep], aa[keep], xx[keep], term[keep], total[keep]
    out[idx] = total
    return out


def _fraction_q(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Continued fraction 1/(x+1−a− 1(1−a)/(x+3−a− 2(2−a)/(x+5−a− …))), so that
    Q(a, x) = x^a e^−x / Γ(a) times it, for x > a: modified Lentz (Numerical
    Recipes §6.2, eq. 6.2.7; DLMF 8.9.2)."""
    out = np.empty_like(x)
    idx = np.arange(x.size)
    aa = a
    b = x + 1.0 - a
    c = np.full_like(x, 1.0 / _TINY)
    d = 1.0 / b
    h = d.copy()
    i = 0
    while idx.size and i < 20000:
        for _ in range(_BLOCK):
            i += 1
            an = -i * (i - aa)
            b = b + 2.0
            d = an * d + b
            d = np.where(np.abs(d) < _TINY, _TINY, d)
            c = b + an / c
            c = np.where(np.abs(c) < _TINY, _TINY, c)
            d = 1.0 / d
            delta = d * c
            h = h * delta
        done = np.abs(delta - 1.0) <= _EPS
        out[idx[done]] = h[done]
        keep = ~done
        idx, aa, b, c, d, h = idx[keep], aa[keep], b[keep], c[keep], d[keep], h[keep]
    out[idx] = h
    return out


def _series_q(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Q(a, x) for small x (≤ 1.1) and a not much above it, where Q ≪ 1 would be
    lost in 1 − P: Q = 1 − x^a/Γ(a+1) − x^a/Γ(a) Σ_{n≥1} (−x)^n / (n! (a+n))
    (DLMF 8.7.3, 8.2.3)."""
    total = np.zeros_like(x)
    fac = np.ones_like(x)
    done = np.zeros(x.shape, dtype=bool)
    for n in range(1, 200):  # x ≤ 1.1: x^n/n! < 1e-17 by n ≈ 25
        fac = fac * (-x / n)
        term = fac / (a + n)
        total = np.where(done, total, total + term)
        done |= np.abs(term) <= _EPS * np.abs(total)
        if n % _BLOCK == 0 and done.all():
            break
    log_x = np.log(x)
    return (-np.expm1(a * log_x - _lgamma1p(a))
            - np.exp(a * log_x - _map(math.lgamma, a)) * total)


def _lgamma1p(a: np.ndarray) -> np.ndarray:
    """ln Γ(1 + a) to full relative precision for small a ≥ 0 as well.

    Below a = 0.2 the Taylor series −γa + Σ_{k≥2} (−1)^k ζ(k) a^k / k (DLMF 5.7.3;
    26 terms reach 1e-18); ``math.lgamma`` above, where ln Γ(1 + a) is no longer
    small against its absolute error.
    """
    out = np.empty_like(a)
    small = a < 0.2
    out[small] = a[small] * _horner(_lgamma1p_coefficients(), a[small])
    out[~small] = _map(math.lgamma, 1.0 + a[~small])
    return out


@functools.cache
def _lgamma1p_coefficients() -> tuple[float, ...]:
    """−γ, ζ(2)/2, −ζ(3)/3, … (ζ by Euler–Maclaurin from 50 terms, DLMF 2.10.1)."""
    n = 50
    coeffs = [-0.57721566490153286061]  # Euler's constant, DLMF 5.2.3
    for k in range(2, 27):
        zeta = (math.fsum(j ** -k for j in range(1, n)) + n ** (1 - k) / (k - 1)
                + 0.5 * n ** -k + k * n ** (-k - 1) / 12.0
                - k * (k + 1) * (k + 2) * n ** (-k - 3) / 720.0
                + k * (k + 1) * (k + 2) * (k + 3) * (k + 4) * n ** (-k - 5) / 30240.0)
        coeffs.append((-1) ** k * zeta / k)
    return tuple(coeffs)


def _temme_sum(a: np.ndarray, eta: np.ndarray) -> np.ndarray:
    """Σ_k c_k(η) a^−k of the uniform expansion (DLMF 8.12.8), from the Taylor
    coefficients of c_k (tools/make_gamma_coefficients.py)."""
    # Powers that would fall below the smallest normal double slow the product
    # a hundredfold: for |η| < 1e-11 the terms past the linear one are below 1e-22
    # (and for a > 1e14 those past a⁰ below 1e-17), so they are left out.
    tiny = np.abs(eta) < 1e-11
    eta_big = np.where(tiny, 0.0, eta)
    # einsum, not BLAS: its threads cost milliseconds on a busy machine at these sizes.
    ck = np.einsum("kn,nm->km", _TEMME, _powers(eta_big, _TEMME.shape[1]))
    ck += _TEMME[:, 1:2] * (eta - eta_big)
    inverse = 1.0 / a
    inverse = np.where(inverse < 1e-14, 0.0, inverse)
    return np.sum(ck * _powers(inverse, _TEMME.shape[0]), axis=0)


def _powers(v: np.ndarray, n: int) -> np.ndarray:
    """v^0 … v^(n−1), shape (n, len(v)), by running products (no pow calls)."""
    out = np.empty((n, v.shape[0]))
    out[0] = 1.0
    out[1:] = v
    np.cumprod(out[1:], axis=0, out=out[1:])
    return out


def _asymptotic_pq(a: np.ndarray, m: np.ndarray, half_eta2: np.ndarray):
    """P and Q by the uniform asymptotic expansion (Temme 1979; DLMF 8.12.3-8.12.4):
    Q = ½ erfc(η √(a/2)) + R, P = ½ erfc(−η √(a/2)) − R,
    R = e^(−aη²/2) / √(2πa) Σ_k c_k(η) a^−k, ½η² = λ − 1 − ln λ, λ = x/a = 1 + m."""
    eta = np.sign(m) * np.sqrt(2.0 * half_eta2)
    u = eta * np.sqrt(0.5 * a)
    r = np.exp(-a * half_eta2) / np.sqrt(2.0 * math.pi * a) * _temme_sum(a, eta)
    e = _map(math.erfc, np.abs(u))  # erfc(−v) = 2 − erfc(v)
    q = 0.5 * np.where(u >= 0.0, e, 2.0 - e) + r
    p = 0.5 * np.where(u >= 0.0, 2.0 - e, e) - r
    return p, q


def _regular_pq(a: np.ndarray, x: np.ndarray, lgs: np.ndarray | None = None):
    """P(a, x), Q(a, x) and ln(x^a e^−x / Γ(a)) for flat arrays of a, x > 0 finite
    (``lgs``: ln Γ*(a) when the caller has it).

    Each point takes the method that gives its smaller tail directly, the other
    being one minus it (regions after DiDonato & Morris 1986): the uniform
    expansion for a > 8 with |x − a| < 0.45 a (where the table's twenty terms in
    1/a and thirty in η reach double precision); the continued fraction for
    Q when x ≥ a and x > 1.1; the small-x series for Q when x ≤ 1.1 and a is not
    much above it; the series for P elsewhere.

    The prefactor is a (ln(x/a) − (x − a)/a) + ½ ln(a/2π) − ln Γ*(a), so that
    near x = a (where it matters) no large terms cancel (DiDonato & Morris 1986,
    §2); its first term is −½aη² of the uniform expansion.
    """
    m = (x - a) / a
    near = (m >= -0.5) & (m <= 1.0)
    l1 = _log1pmx(np.where(near, m, 0.0))
    with np.errstate(divide="ignore"):
        ratio = np.where(near, a * l1, a * (np.log(x) - np.log(a)) - (x - a))
    lgs = _lgamma_star(a) if lgs is None else lgs
    log_front = ratio + 0.5 * np.log(a / (2.0 * math.pi)) - lgs
    asy = (a > 8.0) & (np.abs(m) < 0.45)
    if asy.all():
        p, q = _asymptotic_pq(a, m, -l1)
        return p, q, log_front
    p = np.empty_like(x)
    q = np.empty_like(x)
    with np.errstate(divide="ignore"):
        small_x_q = np.where(x <= 0.5, -0.4 / np.log(x) >= a, 1.1 * x >= a)
    cf = ~asy & (x > 1.1) & (x >= a)
    ser_q = ~asy & (x <= 1.1) & small_x_q
    ser_p = ~(asy | cf | ser_q)
    if asy.any():
        p[asy], q[asy] = _asymptotic_pq(a[asy], m[asy], -l1[asy])
    if cf.any():
        q[cf] = np.exp(log_front[cf]) * _fraction_q(a[cf], x[cf])
        p[cf] = 1.0 - q[cf]
    if ser_q.any():
        q[ser_q] = _series_q(a[ser_q], x[ser_q])
        p[ser_q] = 1.0 - q[ser_q]
    if ser_p.any():
        p[ser_p] = np.exp(log_front[ser_p]) / a[ser_p] * _series_p(a[ser_p], x[ser_p])
        q[ser_p] = 1.0 - p[ser_p]
    return p, q, log_front


def _gamma_pq(a, x):
    """P, Q of any a, x (flat float arrays) with scipy.special's conventions at the
    edges: NaN for a < 0 or x < 0; P(a, 0) = 0 (a > 0); P(0, x) = 1 (x > 0);
    P(a, ∞) = 1 (a finite); P(∞, x) = 0 (x finite)."""
    p = np.full(x.shape, np.nan)
    q = np.full(x.shape, np.nan)
    ok = (a > 0.0) & (x > 0.0) & np.isfinite(a) & np.isfinite(x)
    if ok.any():
        p[ok], q[ok], _ = _regular_pq(a[ok], x[ok])
    zero = ((x == 0.0) & (a > 0.0)) | ((a == np.inf) & (x >= 0.0) & (x < np.inf))
    one = ((a == 0.0) & (x > 0.0)) | ((x == np.inf) & (a >= 0.0) & (a < np.inf))
    p[zero], q[zero] = 0.0, 1.0
    p[one], q[one] = 1.0, 0.0
    return p, q


def gammainc(a, x):
    """Regularised lower incomplete gamma function P(a, x) = γ(a, x) / Γ(a).

    Series, continued fraction (Numerical Recipes 3rd ed. §6.2; DLMF 8.7, 8.9) or,
    for large a near the transition x ≈ a, Temme's uniform asymptotic expansion
    (DLMF 8.12), chosen by region as DiDonato & Morris (1986).

    Parameters
    ----------
    a : array_like
        Shape parameter, ≥ 0.
    x : array_like
        Argument, ≥ 0; broadcast against ``a``.

    Returns
    -------
    ndarray or float
        Broadcast shape of ``a`` and ``x``, in [0, 1]; NaN outside the domain.
    """
    if _native.enabled():
        return special_calls.gammainc(a, x)
    a, x = _as_float(a, x)
    p, _ = _gamma_pq(a.ravel(), x.ravel())
    return p.reshape(a.shape)[()]


def gammaincc(a, x):
    """Regularised upper incomplete gamma function Q(a, x) = 1 − P(a, x), computed
    directly where it is the smaller tail (see :func:`gammainc`).

    Parameters
    ----------
    a, x : array_like
        As :func:`gammainc`.

    Returns
    -------
    ndarray or float
        Broadcast shape of ``a`` and ``x``.
    """
    if _native.enabled():
        return special_calls.gammaincc(a, x)
    a, x = _as_float(a, x)
    _, q = _gamma_pq(a.ravel(), x.ravel())
    return q.reshape(a.shape)[()]


def _gamma_root(a: np.ndarray, t: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """x > 0 with Q(a, x) = t where ``upper``, else P(a, x) = t; flat arrays,
    a > 0 finite, 0 < t ≤ ½ (the smaller tail, so t keeps its relative precision).

    Halley's method on ln P (or −ln Q) as a function of u = ln x, Newton's where
    Halley's correction is large: the density of ln x under a gamma law,
    e^(au − e^u)/Γ(a), is log-concave, so ln P(e^u) and ln Q(e^u) are concave in
    u (Prékopa's theorem) and Newton's iterates on these monotone functions
    converge from any start. The
    start is the Cornish–Fisher expansion of DiDonato & Morris (1986, eq. 31),
    raised to a tail bound where that is larger: P ≤ x^a/Γ(a+1) (all a) and, for
    a ≥ 1, Q ≥ x^(a−1) e^−x/Γ(a) (DLMF 8.10.1); for a < 1 the upper tail starts
    from the latter's root or, where x is small, from the former's. Stops after
    a Halley step taken from a residual |ln P − ln p| below 1e-5 (a Newton step:
    1e-8), which leaves a residual of order 1e-15, or a step below 1e-9.
    """
    lg1 = _map(math.lgamma, 1.0 + a)
    log_t = np.log(t)
    s = ndtri(t)
    s = np.where(upper, -s, s)  # the normal deviate of the root's lower tail
    ra = np.sqrt(a)
    s2 = s * s
    cf = (a + s * ra + (s2 - 1.0) / 3.0 + (s2 * s - 7.0 * s) / (36.0 * ra)
          - (3.0 * s2 * s2 + 7.0 * s2 - 16.0) / (810.0 * a)
          + (9.0 * s2 * s2 * s + 256.0 * s2 * s - 433.0 * s) / (38880.0 * a * ra))
    cf = np.where(a >= 1.0, cf, 0.0)
    # P ≈ x^a / Γ(a+1): a lower bound of the root of P = p.
    small = np.exp((np.where(upper, np.log1p(-t), log_t) + lg1) / a)
    # Q ≈ x^(a−1) e^−x / Γ(a): fixed-point passes of x = −ln(t Γ(a)) + (a−1) ln x.
    big = -log_t - (lg1 - np.log(a))
    for _ in range(4):
        big = -log_t - (lg1 - np.log(a)) + (a - 1.0) * np.log(np.maximum(big, 1.0))
    x = np.where(upper,
                 np.where(a >= 1.0, np.maximum(cf, big),
                          np.where(big > 1.0 + a, big, small)),
                 np.maximum(cf, small))
    out = x.copy()
    idx = np.flatnonzero(x > 0.0)  # below the smallest double: the root is 0 to it
    aa, lt, up, xx = a[idx], log_t[idx], upper[idx], x[idx]
    lgs = _lgamma_star(aa)
    for _ in range(100):
        if not idx.size:
            break
        p, q, log_front = _regular_pq(aa, xx, lgs)
        tail = np.where(up, q, p)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            log_tail = np.log(tail)
            g = np.where(up, lt - log_tail, log_tail - lt)  # increasing in u
            r = np.exp(log_front - log_tail)  # |d ln tail / du|
            newton = -g / r
            # g'' = r (a − x) ∓ r² for ln P and −ln Q (d ln D/du = a − x).
            curve = r * (aa - xx) + np.where(up, r * r, -r * r)
            factor = 1.0 + 0.5 * newton * curve / r
            halley = (factor > 0.5) & (factor < 2.0)
            step = np.where(halley, newton / factor, newton)
        # A tail that underflowed: back towards the median.
        step = np.where(tail > 0.0, step, np.where(up, -1.0, 1.0))
        step = np.clip(np.nan_to_num(step, nan=0.0), -10.0, 10.0)
        xx = xx * np.exp(step)
        out[idx] = xx
        # The residual g (a log-probability) left after a Halley step is of order
        # g³, after a Newton step g²: no further evaluation once that is ~1e-15.
        small = np.abs(g) < np.where(halley, 1e-5, 1e-8)
        done = small | (np.abs(step) < 1e-9) | (xx == 0.0) | ~np.isfinite(xx)
        keep = ~done
        idx, aa, lt, up, xx, lgs = (idx[keep], aa[keep], lt[keep], up[keep], xx[keep],
                                    lgs[keep])
    return out


def _gamma_inverse(a, y, complement: bool):
    """Shared body of :func:`gammaincinv` (y = p) and :func:`gammainccinv` (y = q)."""
    a, y = _as_float(a, y)
    shape = a.shape
    a, y = a.ravel(), y.ravel()
    out = np.full(a.shape, np.nan)
    ok = (a > 0.0) & np.isfinite(a) & (y > 0.0) & (y < 1.0)
    if ok.any():
        yy = y[ok]
        # Solve on the smaller tail: p > ½ is the root of Q = 1 − p (exact).
        upper = (yy > 0.5) != complement
        t = np.where(yy > 0.5, 1.0 - yy, yy)
        out[ok] = _gamma_root(a[ok], t, upper)
    defined = (a >= 0.0) & (a < np.inf)
    lo, hi = (y == 1.0, y == 0.0) if complement else (y == 0.0, y == 1.0)
    out[defined & lo] = 0.0
    out[defined & hi] = np.inf
    return out.reshape(shape)[()]


def gammaincinv(a, p):
    """Inverse of :func:`gammainc` in x: the x ≥ 0 with P(a, x) = p.

    Newton iteration on ln P (or ln Q for p > ½, from the complement) in ln x,
    started from the Wilson–Hilferty approximation or the small-x and large-x
    tail formulas (DiDonato & Morris 1986); about 1e-13 relative for a from 1e-3
    to 1e7 and p down to the smallest normal double. ``2 * gammaincinv(k/2, p)``
    is the chi-square quantile with k degrees of freedom.

    Parameters
    ----------
    a : array_like
        Shape parameter, > 0.
    p : array_like
        Probability in [0, 1]; broadcast against ``a``.

    Returns
    -------
    ndarray or float
        Broadcast shape; 0 at p = 0, ∞ at p = 1, NaN outside the domain.
    """
    if _native.enabled():
        return special_calls.gammaincinv(a, p)
    return _gamma_inverse(a, p, complement=False)


def gammainccinv(a, q):
    """Inverse of :func:`gammaincc` in x: the x ≥ 0 with Q(a, x) = q, solved on the
    smaller tail so that q near 0 (the far upper tail) keeps full precision.

    Parameters
    ----------
    a : array_like
        Shape parameter, > 0.
    q : array_like
        Probability in [0, 1]; broadcast against ``a``.

    Returns
    -------
    ndarray or float
        Broadcast shape; ∞ at q = 0, 0 at q = 1, NaN outside the domain.
    """
    if _native.enabled():
        return special_calls.gammainccinv(a, q)
    return _gamma_inverse(a, q, complement=True)


def _fraction_beta(a: np.ndarray, b: np.ndarray, x: np.ndarray,
                   guard: bool = False) -> np.ndarray:
    """Continued fraction 1/(1+ d1/(1+ d2/(1+ …))) of I_x(a, b), modified Lentz
    (DLMF 8.17.22; Numerical Recipes §6.4, ``betacf``):
    d_2m+1 = −(a+m)(a+b+m) x / ((a+2m)(a+2m+1)), d_2m = m(b−m) x / ((a+2m−1)(a+2m)).
    Without ``guard`` the denominators are not kept off zero (the caller redoes
    any point that comes out non-finite with it): a third fewer operations."""
    out = np.empty_like(x)
    idx = np.arange(x.size)
    aa, bb, xx = a, b, x
    c = np.ones_like(x)
    d = 1.0 - (a + b) * x / (a + 1.0)
    d = 1.0 / np.where(np.abs(d) < _TINY, _TINY, d)
    h = d.copy()
    m = 0
    while idx.size and m < 20000:
        for _ in range(_BLOCK):
            m += 1
            m2 = 2 * m
            for num in (m * (bb - m) * xx / ((aa - 1.0 + m2) * (aa + m2)),
                        -(aa + m) * (aa + bb + m) * xx / ((aa + m2) * (aa + 1.0 + m2))):
                d = 1.0 + num * d
                c = 1.0 + num / c
                if guard:
                    d = np.where(np.abs(d) < _TINY, _TINY, d)
                    c = np.where(np.abs(c) < _TINY, _TINY, c)
                d = 1.0 / d
                delta = d * c
                h = h * delta
        done = np.abs(delta - 1.0) <= _EPS
        out[idx[done]] = h[done]
        keep = ~done
        idx, aa, bb, xx, c, d, h = (idx[keep], aa[keep], bb[keep], xx[keep], c[keep],
                                    d[keep], h[keep])
    out[idx] = h
    return out


def _log_beta_front(a: np.ndarray, b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """ln(x^a (1−x)^b / B(a, b)) for a, b > 0 and 0 < x < 1.

    With c = a + b and Γ(z) = √(2π) z^(z−½) e^−z Γ*(z):
    ½ ln(ab / 2πc) + ln Γ*(c) − ln Γ*(a) − ln Γ*(b) + a(ln t_a − (t_a − 1))
    + b(ln t_b − (t_b − 1)), t_a = xc/a, t_b = (1−x)c/b, where a(t_a − 1) =
    −b(t_b − 1) = xc − a: no large terms cancel near the mean x = a/c (the
    device of DiDonato & Morris, ACM TOMS 18(3), 1992, for the beta ratio).
    """
    c = a + b
    y = 1.0 - x
    d = x * b - y * a  # = xc − a, without the rounding of c (y is exact for x ≥ ½)
    log_c = np.log(c)
    front_a = _a_log_ratio(a, np.log(x) + log_c - np.log(a), d)
    front_b = _a_log_ratio(b, np.log(y) + log_c - np.log(b), -d)
    return (0.5 * np.log(a * b / (2.0 * math.pi * c)) + _lgamma_star(c) - _lgamma_star(a)
            - _lgamma_star(b) + front_a + front_b)


def betainc(a, b, x):
    """Regularised incomplete beta function I_x(a, b).

    The continued fraction of DLMF 8.17.22 where x < (a+1)/(a+b+2), else
    1 − I_(1−x)(b, a) (Numerical Recipes 3rd ed. §6.4), with the prefactor
    x^a (1−x)^b / (a B(a, b)) computed through Stirling's series so that large
    a and b lose no precision.

    Parameters
    ----------
    a, b : array_like
        Shape parameters, ≥ 0.
    x : array_like
        In [0, 1]; the three broadcast together.

    Returns
    -------
    ndarray or float
        Broadcast shape; NaN outside the domain (and for a = b = 0), with
        scipy.special's values where a or b is 0 or ∞.
    """
    if _native.enabled():
        return special_calls.betainc(a, b, x)
    a, b, x = _as_float(a, b, x)
    shape = a.shape
    a, b, x = a.ravel(), b.ravel(), x.ravel()
    out = np.full(a.shape, np.nan)
    ok = ((a > 0.0) & (b > 0.0) & np.isfinite(a) & np.isfinite(b)
          & (x > 0.0) & (x < 1.0))
    if ok.any():
        ao, bo, xo = a[ok], b[ok], x[ok]
        front = np.exp(_log_beta_front(ao, bo, xo))
        swap = xo > (ao + 1.0) / (ao + bo + 2.0)
        first = np.where(swap, bo, ao)
        second = np.where(swap, ao, bo)
        arg = np.where(swap, 1.0 - xo, xo)
        fraction = _fraction_beta(first, second, arg)
        bad = ~np.isfinite(fraction)
        if bad.any():
            fraction[bad] = _fraction_beta(first[bad], second[bad], arg[bad], guard=True)
        part = front * fraction / first
        out[ok] = np.where(swap, 1.0 - part, part)
    in_range = (x >= 0.0) & (x <= 1.0)
    shapes = (a >= 0.0) & (b >= 0.0) & ~((a == 0.0) & (b == 0.0))
    shapes &= ~((a == np.inf) & (b == np.inf))
    edge = in_range & shapes
    zero = edge & ((x == 0.0) | ((b == 0.0) & (x < 1.0)) | ((a == np.inf) & (x < 1.0)))
    one = edge & ((x == 1.0) | ((a == 0.0) & (x > 0.0)) | ((b == np.inf) & (x > 0.0)))
    out[zero & ~one] = 0.0
    out[one & ~zero] = 1.0
    return out.reshape(shape)[()]
